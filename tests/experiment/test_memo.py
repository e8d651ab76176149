"""The setup caches: exact keys, bounded size, hits equal to the uncached values.

A stale hit (a cached result returned for a setup that differs in any field) would be a wrong
result without any sign of it; these tests make every field of a setup change the key, and
check that a hit returns exactly what the computation returns.
"""

import dataclasses
import warnings

import numpy as np
import pytest

import fringe.experiment.harmonics as harmonics
from fringe.errors import TimeScaleWarning
from fringe.experiment.apparatus import CavityPair, Michelson
from fringe.experiment.basis import Setup
from fringe.experiment.memo import SetupMemo, Unkeyable, clear_setup_caches, fingerprint
from fringe.experiment.turntable import AxisTilt
from fringe.frames import Epoch
from fringe.site import Site
from fringe.theories.rms import RobertsonMansouriSexl
from fringe.theories.sme import KE_NAMES, SmePhoton


def base_setup(**change) -> Setup:
    fields = dict(site=Site(latitude_deg=47.62, longitude_deg=8.3, height_m=400.0, name="lab"),
                  epoch=Epoch("2027-02-03T00:00:00Z", dut1_s=0.1), apparatus=CavityPair(),
                  theory=SmePhoton(), units="1", tilt=None, include_rotation_velocity=True)
    fields.update(change)
    return Setup(**fields)


def up(x: float) -> float:
    """The next float above x (one unit in the last place)."""
    return float(np.nextafter(x, np.inf))


#: One setup per field, each differing from base_setup() in that field only (some by one ulp).
VARIANTS = {
    "site latitude (1 ulp)": dict(site=Site(latitude_deg=up(47.62), longitude_deg=8.3,
                                            height_m=400.0, name="lab")),
    "site longitude": dict(site=Site(latitude_deg=47.62, longitude_deg=8.31, height_m=400.0,
                                     name="lab")),
    "site height": dict(site=Site(latitude_deg=47.62, longitude_deg=8.3, height_m=401.0,
                                  name="lab")),
    "epoch": dict(epoch=Epoch("2027-02-03T00:00:01Z", dut1_s=0.1)),
    "dut1 (1 ulp)": dict(epoch=Epoch("2027-02-03T00:00:00Z", dut1_s=up(0.1))),
    "apparatus separation": dict(apparatus=CavityPair(path_separation_deg=up(90.0))),
    "apparatus kind": dict(apparatus=Michelson(), units="fringe"),
    "units": dict(units="Hz", apparatus=CavityPair(carrier_hz=2.8e14)),
    "tilt": dict(tilt=AxisTilt(south_rad=1e-5)),
    "rotation velocity": dict(include_rotation_velocity=False),
    "theory": dict(theory=RobertsonMansouriSexl(sun_velocity_beta=[1e-3, 0.0, 0.0])),
}


def test_equal_setups_built_apart_have_one_key():
    # a study rebuilds its setup from each campaign's run file: equal values, new objects
    assert fingerprint(base_setup()) == fingerprint(base_setup())
    assert hash(fingerprint(base_setup())) == hash(fingerprint(base_setup()))


@pytest.mark.parametrize("what", sorted(VARIANTS))
def test_every_field_of_the_setup_changes_the_key(what):
    assert fingerprint(base_setup(**VARIANTS[what])) != fingerprint(base_setup())


def test_key_tells_floats_arrays_and_functions_apart():
    assert fingerprint(0.0) != fingerprint(-0.0)
    assert fingerprint(1.0) != fingerprint(up(1.0))
    assert fingerprint(np.zeros(3)) != fingerprint(np.zeros((3, 1)))
    assert fingerprint(np.zeros(3)) != fingerprint(np.zeros(3, dtype=np.float32))
    assert fingerprint({"a": 1.0, "b": 2.0}) == fingerprint({"b": 2.0, "a": 1.0})
    assert fingerprint({"a": 1.0}) != fingerprint({"a": up(1.0)})
    assert fingerprint(np.sin) is not None and fingerprint(len) != fingerprint(abs)

    def f():
        return 0

    def g():
        return 0

    assert fingerprint(f) != fingerprint(g)


def test_an_object_it_cannot_key_is_refused():
    class Slotted:
        __slots__ = ("x",)

    with pytest.raises(Unkeyable):
        fingerprint(Slotted())
    with pytest.raises(Unkeyable):
        fingerprint(np.array([object()]))


def test_memo_is_bounded_in_entries_and_bytes():
    memo = SetupMemo("test", max_entries=3, max_bytes=2000, max_entry_bytes=1000)
    assert not memo.put("big", np.zeros(200))                  # 1600 bytes > 1000: not kept
    assert memo.get("big") is None
    for i in range(5):
        memo.put(i, np.full(10, float(i)))                     # 80 bytes each
    assert memo.stats()["entries"] == 3
    assert memo.get(0) is None and memo.get(1) is None         # the oldest dropped
    assert np.array_equal(memo.get(4), np.full(10, 4.0))
    for i in range(5, 8):
        memo.put(i, np.zeros(100))                             # 800 bytes each: 2000 at most
    assert memo.stats()["bytes"] <= 2000
    clear_setup_caches()                                       # clears every registered memo
    assert memo.stats() == {"name": "test", "entries": 0, "bytes": 0, "hits": 0, "misses": 0}


def test_harmonics_at_hit_is_the_uncached_result_and_a_copy():
    clear_setup_caches()
    setup = base_setup()
    direct = harmonics._harmonics_at(setup, 3600.0, None, KE_NAMES, None)
    first = harmonics.harmonics_at(setup, 3600.0, names=KE_NAMES)
    assert harmonics.HARMONICS_MEMO.stats()["misses"] == 1
    second = harmonics.harmonics_at(base_setup(), 3600.0, names=KE_NAMES)
    assert harmonics.HARMONICS_MEMO.stats()["hits"] == 1
    for got in (first, second):
        assert np.array_equal(got[0], direct[0]) and np.array_equal(got[1], direct[1])
        assert got[2] == direct[2]
    second[0][:] = 0.0                                         # the caller's copy only
    assert np.array_equal(harmonics.harmonics_at(setup, 3600.0, names=KE_NAMES)[0], direct[0])


@pytest.mark.parametrize("what", sorted(VARIANTS))
def test_harmonics_at_does_not_hit_for_another_setup(what):
    clear_setup_caches()
    harmonics.harmonics_at(base_setup(), 0.0)
    other = base_setup(**VARIANTS[what])
    got = harmonics.harmonics_at(other, 0.0)
    assert harmonics.HARMONICS_MEMO.stats()["hits"] == 0
    direct = harmonics._harmonics_at(other, 0.0, None, None, None)
    assert np.array_equal(got[0], direct[0])


@pytest.mark.parametrize("change", [
    dict(t_ref_s=up(0.0)), dict(names=KE_NAMES[:3]), dict(params={"ke_ZZ": 1e-17}),
    dict(c2i=np.eye(3))])
def test_harmonics_at_does_not_hit_for_other_arguments(change):
    clear_setup_caches()
    setup = base_setup()
    harmonics.harmonics_at(setup, 0.0)
    args = dict(t_ref_s=0.0, params=None, names=None, c2i=None) | change
    got = harmonics.harmonics_at(setup, **args)
    assert harmonics.HARMONICS_MEMO.stats()["hits"] == 0
    direct = harmonics._harmonics_at(setup, args["t_ref_s"], args["params"], args["names"],
                                     args["c2i"])
    assert np.array_equal(got[0], direct[0])


def test_harmonics_at_does_not_hit_through_a_replaced_ephemeris(monkeypatch):
    clear_setup_caches()
    setup = base_setup()
    harmonics.harmonics_at(setup, 0.0)
    monkeypatch.setattr(harmonics, "earth_velocity_beta", lambda epoch, t_s, **_: np.zeros((1, 3)))
    got = harmonics.harmonics_at(setup, 0.0)
    assert harmonics.HARMONICS_MEMO.stats()["hits"] == 0
    assert np.array_equal(got[0], harmonics._harmonics_at(setup, 0.0, None, None, None)[0])


def test_a_result_that_warned_is_not_kept_and_warns_every_time():
    clear_setup_caches()
    setup = base_setup(epoch=Epoch("2150-01-01T00:00:00Z"))   # beyond epv00's 1900-2100
    for _ in range(2):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            harmonics.harmonics_at(setup, 0.0)
        assert any(issubclass(w.category, TimeScaleWarning) for w in caught)
    assert harmonics.HARMONICS_MEMO.stats()["entries"] == 0


def test_fields_of_setup_are_all_covered():
    # a field added to Setup later needs a variant above (or the key would ignore it)
    covered = {"site", "epoch", "apparatus", "units", "tilt", "include_rotation_velocity",
               "theory", "_checked"}
    assert {f.name for f in dataclasses.fields(Setup)} <= covered


def test_one_instant_harmonics_with_kept_tensors_are_those_of_basis_bit_for_bit():
    # the old computation: basis() at the grid's azimuths, the design built in place
    from fringe.experiment.basis import basis

    clear_setup_caches()
    for setup in (base_setup(), base_setup(tilt=AxisTilt(east_rad=2e-4)),
                  base_setup(apparatus=Michelson(), units="fringe")):
        th, ph, state = harmonics._grid_state(setup, 5000.0)
        g = basis(setup, np.zeros_like(th), np.pi - th, KE_NAMES, state=state)
        funcs = [np.ones_like(ph), np.sin(ph), np.cos(ph), np.sin(2 * ph), np.cos(2 * ph)]
        design = np.stack([np.cos(2 * th) * f for f in funcs]
                          + [np.sin(2 * th) * f for f in funcs], axis=1)
        want, *_ = np.linalg.lstsq(design, g, rcond=None)
        for _ in range(2):                       # the second time from the kept tensors
            got = harmonics._harmonics_at(setup, 5000.0, None, KE_NAMES, None)
            assert np.array_equal(got[0], want)


def test_grid_state_from_tiled_frames_is_the_per_row_state_bit_for_bit():
    # the old construction: every one of the N_THETA x N_PHI rows formed on its own
    from fringe.frames import (
        FrameState,
        celestial_to_intermediate,
        earth_velocity_beta,
        rotation_velocity_beta,
    )

    setup = base_setup()
    th, ph, state = harmonics._grid_state(setup, 5000.0)
    beta = np.repeat(earth_velocity_beta(setup.epoch, [5000.0], grid_s=None), th.size, axis=0)
    c2i = celestial_to_intermediate(setup.epoch, [5000.0], grid_s=None)[0]
    beta = beta + rotation_velocity_beta(ph, setup.site.axis_distance_m, c2i)
    plain = FrameState(ph, setup.site.colatitude_rad, beta, c2i=c2i)
    for name in ("phi_rad", "beta", "rotation", "lab_transform"):
        assert np.array_equal(getattr(state, name), getattr(plain, name)), name
