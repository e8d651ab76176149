"""The frame state's lab transform: formed once per state, read-only, not carried by take()."""

import numpy as np
import pytest

from fringe.frames import Epoch, boost_matrix, frame_state
from fringe.site import Site


def test_lab_transform_is_kept_read_only_and_equals_its_definition():
    state = frame_state(Epoch("2027-02-03T00:00:00Z"), np.arange(0.0, 7200.0, 600.0),
                        Site(latitude_deg=47.62, longitude_deg=8.3))
    lt = state.lab_transform
    assert state.lab_transform is lt                       # formed once
    with pytest.raises(ValueError):
        lt[0, 0, 0] = 1.0
    lam = boost_matrix(state.beta)                         # L = diag(1, R) Lambda (definition)
    want = np.zeros_like(lam)
    want[:, 0, :] = lam[:, 0, :]
    want[:, 1:, :] = np.einsum("nij,njk->nik", state.rotation, lam[:, 1:, :])
    assert np.array_equal(lt, want)
    part = state.take(slice(2, 5))
    assert part.lab_transform is not lt
    assert np.array_equal(part.lab_transform, lt[2:5])


def test_a_tiled_state_is_the_state_of_the_repeated_rows_bit_for_bit():
    t = np.arange(0.0, 7200.0, 900.0)
    state = frame_state(Epoch("2027-02-03T00:00:00Z"), t, Site(latitude_deg=-31.5,
                                                                longitude_deg=115.8))
    tiled = state.tile(3)
    rows = np.tile(np.arange(t.size), 3)
    plain = frame_state(Epoch("2027-02-03T00:00:00Z"), t[rows],
                        Site(latitude_deg=-31.5, longitude_deg=115.8))
    assert len(tiled) == 3 * t.size
    for name in ("phi_rad", "beta", "c2i", "orbital_phase_rad", "rotation", "lab_transform"):
        assert np.array_equal(getattr(tiled, name), getattr(plain, name)), name
    assert not tiled.lab_transform.flags.writeable
    assert np.array_equal(tiled.take(slice(5, 9)).rotation, plain.rotation[5:9])
