"""The C10 harmonic table by projection vs the closed forms ([R-lab-fourier] ... [R-lab-ktr]).

Anchors [R-...] are entries of docs/references.md.
"""

import json

import erfa
import numpy as np
import pytest

import fringe.experiment.harmonics as harmonics
from fringe.constants import C_M_S, OMEGA_EARTH_RAD_S
from fringe.conventions import (
    HARMONIC_NAMES,
    azimuth_from_theta,
    horizontal_direction_lab,
    theta_from_azimuth,
)
from fringe.experiment.apparatus import CavityPair, CavityVsReference, Michelson, OrientedClock
from fringe.experiment.basis import Setup, basis
from fringe.frames import Epoch, FrameState, circular_orbit_beta
from fringe.site import Site
from fringe.theories.clock import DirectionalClock
from fringe.theories.rms import RobertsonMansouriSexl
from fringe.theories.sme import KE_NAMES, KO_NAMES, SME_NAMES, SmePhoton
from tests.helpers import oracle

CHI = np.radians(37.48)                                   # [R-vec-common]
BETA_ORB = 9.93e-5                                        # [R-vec-common]
ETA = np.radians(23.4392794)                              # [R-vec-common]
V_SUN_BETA = 369.82e3 / C_M_S * np.array([-0.970762, 0.207371, -0.120904])  # [R-RMS-inputs]
EPOCH = Epoch("2026-04-01T00:00:00Z")
IDX = {name: i for i, name in enumerate(HARMONIC_NAMES)}
# Rounding floor of a projected harmonic per unit coefficient: the least-squares projection of
# 512 grid samples of O(1) numbers carries ~sqrt(512) eps ~ 5e-15. (A unit ktr is an O(1)
# rest-frame tensor whose boosted anisotropy is only ~beta^2, so this floor applies to it too.)
FLOOR = 1e-14
SME = SmePhoton()
RMS = RobertsonMansouriSexl(sun_velocity_beta=V_SUN_BETA)


def setup_for(chi, apparatus=None, theory=SME, rotation=False):
    return Setup(site=Site(latitude_deg=90.0 - np.degrees(chi), longitude_deg=0.0), epoch=EPOCH,
                 apparatus=apparatus or CavityPair(), theory=theory,
                 include_rotation_velocity=rotation)


def freeze_orbit(monkeypatch, beta_orbit, orbital_phase=0.0):
    """Replace the ephemeris inside the projection by the circular orbit at one phase, and the
    Earth orientation by a pole along SCCEF Z: the closed forms' model (Q = 1,
    docs/references.md [R-time-earth-orientation]).
    """
    value = circular_orbit_beta([orbital_phase], beta_orbit, ETA)
    monkeypatch.setattr(harmonics, "earth_velocity_beta", lambda epoch, t_s, **_: value.copy())
    fix_pole(monkeypatch)


def fix_pole(monkeypatch):
    """The celestial-to-intermediate matrix Q inside the projection set to the identity."""
    monkeypatch.setattr(harmonics, "celestial_to_intermediate",
                        lambda epoch, t_s, **_: np.eye(3)[None].repeat(len(t_s), axis=0))


def unit_ke(name):
    """SCCEF tensor of a unit ke coefficient (XX = (d - ZZ)/2, YY = -(d + ZZ)/2)."""
    comps = {"ke_XY": (0, 1), "ke_XZ": (0, 2), "ke_YZ": (1, 2)}
    k = np.zeros((3, 3))
    if name in comps:
        i, j = comps[name]
        k[i, j] = k[j, i] = 1.0
    elif name == "ke_XXmYY":
        k[0, 0], k[1, 1] = 0.5, -0.5
    else:
        k[0, 0], k[1, 1], k[2, 2] = -0.5, -0.5, 1.0
    return k


def fourier_table(kxy, kxz, kyz, kxx_m_yy, kzz, chi):
    """[R-lab-fourier] (two-path normalisation), in HARMONIC_NAMES order."""
    s, c = np.sin(chi), np.cos(chi)
    return np.array([0.75 * s * s * kzz, -s * c * kyz, -s * c * kxz,
                     0.5 * (1 + c * c) * kxy, 0.25 * (1 + c * c) * kxx_m_yy,
                     0.0, s * kxz, -s * kyz, -0.5 * c * kxx_m_yy, c * kxy])


def k_components(k):
    return k[0, 1], k[0, 2], k[1, 2], k[0, 0] - k[1, 1], k[2, 2]


def closed_form_sme(name, chi, ot, beta_orbit, beta_l):
    """[R-lab-fourier] ... [R-lab-ktr] for a unit value of one SME coefficient (circular orbit)."""
    v = {n: 0.0 for n in SME_NAMES}
    v[name] = 1.0
    ke = np.zeros((3, 3))
    for n in KE_NAMES:
        ke += v[n] * unit_ke(n)
    kxy, kxz, kyz, kdd, kzz = k_components(ke)
    oxy, oxz, oyz, ktr = v["ko_XY"], v["ko_XZ"], v["ko_YZ"], v["ktr"]
    b, so, co, se, ce = beta_orbit, np.sin(ot), np.cos(ot), np.sin(ETA), np.cos(ETA)
    # [R-lab-orbital] (orbital boost) and [R-lab-ktr] (ktr, O(beta^2))
    kxy += b * (oxz * so + oyz * ce * co) + ktr * b * b * ce * np.sin(2 * ot)
    kdd += 2 * b * (oxz * ce * co - oyz * so) - 2 * ktr * b * b * (so * so - ce * ce * co * co)
    kxz += -b * (oxy * so - oyz * se * co) + ktr * b * b * se * np.sin(2 * ot)
    kyz += b * (oxy * ce - oxz * se) * co - ktr * b * b * np.sin(2 * ETA) * co * co
    kzz += (2 / 3 * b * (2 * oxy * se * co + oxz * ce * co + oyz * so)
            - 2 * ktr * b * b * (se * se * co * co - 1 / 3))
    table = fourier_table(kxy, kxz, kyz, kdd, kzz, chi)
    # [R-lab-rotation] (Earth-rotation terms, first order in beta_L)
    s, c = np.sin(chi), np.cos(chi)
    table[IDX["B0"]] += beta_l * s * oxy
    table[IDX["Bs1"]] += beta_l * c * oxz
    table[IDX["Bc1"]] += -beta_l * c * oyz
    table[IDX["Cs1"]] += -beta_l * oyz
    table[IDX["Cc1"]] += -beta_l * oxz
    return table


# ---- the Fourier table vs the projection -----------------------------------------------------

def test_fourier_table_machine_precision_random_chi(monkeypatch):
    """With no lab velocity the exact and first-order routes coincide: machine precision."""
    freeze_orbit(monkeypatch, 0.0)
    rng = np.random.default_rng(1)
    for chi in rng.uniform(0.05, np.pi - 0.05, 6):
        coef, unc, labels = harmonics.harmonics_at(setup_for(chi), 0.0, names=KE_NAMES)
        for j, name in enumerate(labels):
            closed = fourier_table(*k_components(unit_ke(name)), chi)
            # [R-struct-table-matrix] "Fourier table vs direct matrix formula": machine precision
            np.testing.assert_allclose(coef[:, j], closed, rtol=0, atol=FLOOR)
        assert np.all(unc <= FLOOR)
        # RMS through the same table with K_RMS ([R-RMS-signal]): also exact
        rms_coef, _, _ = harmonics.harmonics_at(setup_for(chi, theory=RMS), 0.0,
                                                names=("rms_mm",))
        closed = fourier_table(*k_components(oracle.k_rms(1.0, V_SUN_BETA)), chi)
        np.testing.assert_allclose(rms_coef[:, 0], closed, rtol=0,
                                   atol=1e-14 * np.abs(closed).max())


@pytest.mark.parametrize("utc", ["1990-06-01T00:00:00Z", "2015-06-01T00:00:00Z",
                                 "2026-04-01T00:00:00Z", "2040-06-01T00:00:00Z"])
@pytest.mark.filterwarnings("ignore::fringe.errors.TimeScaleWarning")   # 2040: future leap seconds
def test_harmonics_are_those_of_the_tensor_in_intermediate_axes(monkeypatch, utc):
    """With the real Earth orientation the table is the closed form of Q K Qᵀ, not of K.

    Q (IAU 2006/2000A, ERFA c2i06a) at the reference instant carries K into the axes the lab turns
    about ([R-time-earth-orientation]); no lab velocity, so the projection is exact algebra.
    """
    monkeypatch.setattr(harmonics, "earth_velocity_beta", lambda epoch, t_s, **_: np.zeros((1, 3)))
    chi = CHI
    setup = Setup(site=Site(latitude_deg=90.0 - np.degrees(chi), longitude_deg=0.0),
                  epoch=Epoch(utc), apparatus=CavityPair(), theory=SME,
                  include_rotation_velocity=False)
    coef, _, labels = harmonics.harmonics_at(setup, 0.0, names=KE_NAMES)
    q = erfa.c2i06a(*setup.epoch.tt_jd([0.0]))[0]        # reference: pyerfa 2.0.1.5 c2i06a
    for j, name in enumerate(labels):
        k_cirs = q @ unit_ke(name) @ q.T
        # interpolation of Q (<= 1.2e-11, [R-time-T15]) times O(1) entries, plus rounding
        np.testing.assert_allclose(coef[:, j], fourier_table(*k_components(k_cirs), chi),
                                   rtol=0, atol=1e-10)
    # the pole's offset from SCCEF Z moves ke_ZZ into the m = 1 harmonics: C_c1, C_s1 are
    # -sc (Q K Qᵀ)^{XZ, YZ} ~ -(3/2) sc (X, Y) of the pole ([R-time-earth-orientation])
    zz = coef[:, labels.index("ke_ZZ")]
    pole = np.hypot(q[2, 0], q[2, 1])
    m1 = np.hypot(zz[IDX["Cs1"]], zz[IDX["Cc1"]])
    assert m1 == pytest.approx(1.5 * np.sin(chi) * np.cos(chi) * pole, rel=1e-3)


@pytest.mark.parametrize("ot", [0.0, 1.1, 2.5, 4.4])
@pytest.mark.parametrize("names, rotation", [(KE_NAMES + KO_NAMES, True), (("ktr",), False)],
                         ids=["ke-ko-with-rotation", "ktr-orbit-only"])
def test_closed_forms_with_orbit_and_rotation(monkeypatch, ot, names, rotation):
    freeze_orbit(monkeypatch, BETA_ORB, ot)
    rng = np.random.default_rng(int(ot * 10))
    chi = rng.uniform(0.1, np.pi - 0.1)
    setup = setup_for(chi, rotation=rotation)
    beta_l = OMEGA_EARTH_RAD_S * setup.site.axis_distance_m / C_M_S if rotation else 0.0
    coef, _, labels = harmonics.harmonics_at(setup, 0.0, names=names)
    beta = BETA_ORB + beta_l
    for j, name in enumerate(labels):
        closed = closed_form_sme(name, chi, ot, BETA_ORB, beta_l)
        # [R-lab-orbital]-[R-lab-ktr] are first order (ktr: second) in beta; fringe boosts exactly.
        # Neglected: ~beta^2 relative to each column (test_sme measures constants <= 2.6);
        # 10 beta^2 x the column's size. (ktr x beta_L cross terms are outside [R-lab-ktr], hence
        # the ktr column runs with the rotation velocity off.)
        np.testing.assert_allclose(coef[:, j], closed, rtol=0,
                                   atol=10 * beta ** 2 * np.abs(closed).max())


# ---- structural checks (the [R-struct-...] entries) -----------------------------------------

def test_ke_zz_only_in_c0(monkeypatch):
    freeze_orbit(monkeypatch, 0.0)
    pair, _, _ = harmonics.harmonics_at(setup_for(CHI), 0.0, names=("ke_ZZ",))
    single, _, _ = harmonics.harmonics_at(
        setup_for(CHI, CavityVsReference(reference="atomic")), 0.0, names=("ke_ZZ",))
    # [R-struct-ZZ], derived (checked numerically against an exact Lorentz transformation):
    # weight 3/4 sin^2 chi = 0.27769 at 37.48 deg (5 figures: half a unit, 5e-6)
    assert pair[IDX["C0"], 0] == pytest.approx(0.27769, abs=5e-6)
    assert pair[IDX["C0"], 0] == pytest.approx(0.75 * np.sin(CHI) ** 2, rel=1e-14)
    assert single[IDX["C0"], 0] == pytest.approx(0.375 * np.sin(CHI) ** 2, rel=1e-14)
    others = [i for i in range(10) if i != IDX["C0"]]
    np.testing.assert_allclose(pair[others, 0], 0.0, atol=FLOOR)
    np.testing.assert_allclose(single[others, 0], 0.0, atol=FLOOR)


def test_ke_xy_ratio_cs2_over_bc2(monkeypatch):
    freeze_orbit(monkeypatch, 0.0)
    coef, _, _ = harmonics.harmonics_at(setup_for(CHI), 0.0, names=("ke_XY",))
    c = np.cos(CHI)
    ratio = coef[IDX["Cs2"], 0] / coef[IDX["Bc2"], 0]
    # [R-struct-XY], derived: (1 + cos^2 chi)/(2 cos chi) = 1.02685 at 37.48 deg (6 figures)
    assert ratio == pytest.approx(1.02685, abs=5e-6)
    assert ratio == pytest.approx((1 + c * c) / (2 * c), rel=1e-13)


@pytest.mark.parametrize("chi_deg", [20.0, 37.48, 65.0, 121.98])
def test_ke_xz_ratio_cc1_over_bs1(monkeypatch, chi_deg):
    freeze_orbit(monkeypatch, 0.0)
    chi = np.radians(chi_deg)
    coef, _, _ = harmonics.harmonics_at(setup_for(chi), 0.0, names=("ke_XZ",))
    # [R-struct-XZ], derived: C_c1 / B_s1 = -cos chi
    assert coef[IDX["Cc1"], 0] / coef[IDX["Bs1"], 0] == pytest.approx(-np.cos(chi), rel=1e-13)


@pytest.mark.parametrize("theory, names", [(SME, SME_NAMES), (RMS, ("rms_mm", "rms_kt"))],
                         ids=["sme", "rms"])
def test_single_cavity_has_half_the_pair_amplitudes(theory, names):
    """Real ephemeris and rotation velocity: the relation is exact (C9)."""
    t_ref = 5.0e6
    pair, _, _ = harmonics.harmonics_at(setup_for(CHI, theory=theory, rotation=True), t_ref,
                                        names=names)
    single, unc, _ = harmonics.harmonics_at(
        setup_for(CHI, CavityVsReference(reference="atomic"), theory, rotation=True), t_ref,
        names=names)
    # [R-struct-single-path], derived: a single rotating path gives half of every two-path
    # 2theta amplitude
    assert np.all(np.abs(single - 0.5 * pair) <= 1e-12 * np.abs(pair) + FLOOR)
    # the non-rotating terms it also carries are outside the C10 model
    assert unc[list(names).index("ke_ZZ" if theory is SME else "rms_mm")] > 0.0


def fit_orbit(values, ot):
    """Least-squares coefficients on (1, sin OT, cos OT, sin 2OT, cos 2OT)."""
    design = np.stack([np.ones_like(ot), np.sin(ot), np.cos(ot), np.sin(2 * ot),
                       np.cos(2 * ot)], axis=1)
    return np.linalg.lstsq(design, values, rcond=None)[0]


def harmonics_over_orbit(monkeypatch, names, beta_orbit, ots):
    out = []
    for ot in ots:
        freeze_orbit(monkeypatch, beta_orbit, ot)
        out.append(harmonics.harmonics_at(setup_for(CHI), 0.0, names=names)[0])
    return np.stack(out)                                  # (m, 10, k)


def test_ko_only_with_beta_factors(monkeypatch):
    ots = np.arange(10) * 2 * np.pi / 10
    none = harmonics_over_orbit(monkeypatch, KO_NAMES, 0.0, ots[:1])
    assert np.all(none == 0.0)                            # no lab velocity: no ko signal at all
    per = harmonics_over_orbit(monkeypatch, KO_NAMES, BETA_ORB, ots)
    fit = fit_orbit(per.reshape(len(ots), -1), ots).reshape(5, 10, 3)
    size = np.abs(per).max()
    # [R-struct-ko]: ko terms only with beta sin OT or beta cos OT. The constant and 2 OT parts
    # are of the neglected order beta^3 (test_sme: ko's next order in ke' is beta^3)
    assert size == pytest.approx(BETA_ORB, rel=1.0)          # first order in beta
    assert np.abs(fit[[0, 3, 4]]).max() <= 10 * BETA_ORB ** 3
    doubled = harmonics_over_orbit(monkeypatch, KO_NAMES, 2 * BETA_ORB, ots[:3])
    np.testing.assert_allclose(doubled, 2 * per[:3], rtol=0, atol=10 * BETA_ORB ** 3)


def test_ktr_only_with_beta_squared(monkeypatch):
    ots = np.arange(10) * 2 * np.pi / 10
    none = harmonics_over_orbit(monkeypatch, ("ktr",), 0.0, ots[:1])
    np.testing.assert_allclose(none, 0.0, atol=FLOOR)     # isotropic at rest: no 2theta signal
    per = harmonics_over_orbit(monkeypatch, ("ktr",), BETA_ORB, ots)
    fit = fit_orbit(per.reshape(len(ots), -1), ots).reshape(5, 10, 1)
    size = np.abs(per).max()
    # [R-struct-ktr]: ktr only with beta^2 (sin 2OT, cos^2 OT or constant); no 1 OT terms
    # (their order would be beta^3, absent by parity of the boost in beta)
    assert size == pytest.approx(BETA_ORB ** 2, rel=1.0)
    assert np.abs(fit[[1, 2]]).max() <= FLOOR
    halved = harmonics_over_orbit(monkeypatch, ("ktr",), 0.5 * BETA_ORB, ots[:3])
    np.testing.assert_allclose(halved, 0.25 * per[:3], rtol=0,
                               atol=10 * BETA_ORB ** 2 * size + FLOOR)


@pytest.mark.parametrize("theory, names", [(SME, SME_NAMES), (RMS, ("rms_mm",))],
                         ids=["sme", "rms"])
def test_b0_vanishes_without_rotation_velocity(theory, names):
    coef, _, _ = harmonics.harmonics_at(setup_for(CHI, theory=theory), 2.0e7, names=names)
    # [R-struct-B0]: B0 = 0 to rounding with beta_L = 0 (real ephemeris orbit included)
    assert np.all(np.abs(coef[IDX["B0"]]) <= FLOOR * np.maximum(np.abs(coef).max(axis=0), 1.0))


@pytest.mark.parametrize("name", ["ke_XY", "ke_XXmYY"])
@pytest.mark.parametrize("chi_deg, expected", [
    # [R-struct-asymmetry], derived (arithmetic): (1 + c)^2/(1 - c)^2 = 75.49 at 37.48 deg
    (37.48, 75.49),
    # [R-struct-asymmetry]: southern chi = 121.98 deg, the 2theta - 2phi line is larger by 10.57
    (121.98, 1 / 10.57),
])
def test_northern_sideband_asymmetry(name, chi_deg, expected):
    """Amplitude of the 2theta + 2phi line over the 2theta - 2phi line, by a 2-D DFT."""
    chi = np.radians(chi_deg)
    n_t, n_p = 16, 32
    th, ph = np.meshgrid(2 * np.pi * np.arange(n_t) / n_t, 2 * np.pi * np.arange(n_p) / n_p,
                         indexing="ij")
    state = FrameState(ph.ravel(), chi, np.zeros((th.size, 3)))
    g = basis(setup_for(chi), np.zeros(th.size), np.pi - th.ravel(), (name,), state=state)
    spec = np.abs(np.fft.fft2(g[:, 0].reshape(n_t, n_p)))
    ratio = spec[2, 2] / spec[2, n_p - 2]
    c = np.cos(chi)
    assert ratio == pytest.approx((1 + c) ** 2 / (1 - c) ** 2, rel=1e-12)
    # 4 figures: half a unit in the last digit
    if expected > 1:
        assert ratio == pytest.approx(expected, abs=5e-3)
    else:
        assert 1 / ratio == pytest.approx(1 / expected, abs=5e-3)


def test_azimuth_sign_rule():
    """C7: theta = pi - A; in A the B terms change sign and the C terms do not
    ([R-struct-azimuth])."""
    rng = np.random.default_rng(4)
    params = {n: rng.normal() * 1e-17 for n in KE_NAMES}
    state_one = FrameState(np.array([0.8]), CHI, circular_orbit_beta([0.3], BETA_ORB, ETA))
    az = 2 * np.pi * np.arange(12) / 12
    state = FrameState(np.full(12, 0.8), CHI, np.repeat(state_one.beta, 12, axis=0))
    g = basis(setup_for(CHI), np.zeros(12), az, tuple(params), state=state)
    s = g @ np.array(list(params.values()))
    theta = theta_from_azimuth(az)
    fit_theta = np.linalg.lstsq(np.stack([np.cos(2 * theta), np.sin(2 * theta)], 1), s,
                                rcond=None)[0]
    fit_az = np.linalg.lstsq(np.stack([np.cos(2 * az), np.sin(2 * az)], 1), s, rcond=None)[0]
    np.testing.assert_allclose(fit_az, [fit_theta[0], -fit_theta[1]], rtol=1e-12)
    np.testing.assert_allclose(azimuth_from_theta(theta), az, atol=1e-15)
    # A = 0 (north) is -south, A = 90 deg is east, in lab axes (south, east, up)
    np.testing.assert_allclose(horizontal_direction_lab([0.0, np.pi / 2]),
                               [[-1, 0, 0], [0, 1, 0]], atol=1e-16)


def test_harmonic_table_annual_modulation_and_dict():
    table = harmonics.harmonic_table(setup_for(CHI, rotation=True), 0.0,
                                     values={"ke_XY": 1e-17}, n_orbit=12)
    # with the ephemeris orbit, only ko (first order) and ktr (second order) carry annual
    # modulation; ke changes only at ~beta^2 = 1e-8 relative, below the 1e-6 threshold
    assert sorted(table.annual_modulation_present()) == sorted(KO_NAMES + ("ktr",))
    # the fitted mean of a ke column is its value at the reference instant (to ~beta^2)
    j = table.labels.index("ke_XY")
    np.testing.assert_allclose(table.orbit[0, :, j], table.at_ref[:, j], rtol=0, atol=1e-7)
    json.dumps(table.to_dict())
    assert "ke_XY" in table.summary()


# ---- the observable of each apparatus kind and its factor to the two-path harmonics (C9) --

def pairs(coef):
    """h = C - i B of each harmonic pair (C0, B0), (Cs1, Bs1), ..., from rows of HARMONIC_NAMES."""
    return coef[:5] - 1j * coef[5:]


SEP = np.radians(60.0)


@pytest.mark.parametrize("apparatus, factor", [
    # the beat in hertz is nu S (docs/theory.md, "Cavity and Michelson observables")
    (CavityPair(carrier_hz=2.82e14), 2.82e14),
    # [R-struct-single-path]: one rotating path against a fixed reference gives half
    (CavityVsReference(reference="atomic"), 0.5),
    (CavityVsReference(reference=30.0), 0.5),
    # [R-SME-two-path]: Delta N = -(2L/lambda) S, per pass (folded paths); unequal arms: the
    # mean arm length (derived from the same relation arm by arm)
    (Michelson(arm_length_m=11.0, wavelength_m=590e-9, passes=2), -4 * 11.0 / 590e-9),
    (Michelson(arm_length_m=1.0, arm_length_2_m=1.2, wavelength_m=633e-9), -1.1 * 2 / 633e-9),
    # C8 with path 2 at theta - 60 deg: S_60 = 1/2 (1 - exp(-2i sep)) in h (derived)
    (CavityPair(path_separation_deg=60.0), 0.5 * (1 - np.exp(-2j * SEP))),
], ids=["pair-Hz", "vs-atomic", "vs-cavity", "michelson", "michelson-unequal", "pair-60deg"])
def test_photon_observable_harmonics_are_the_two_path_ones_times_the_factor(apparatus, factor):
    """Every harmonic pair of the kind's own observable is f x the two-path pair (C9)."""
    t_ref = 5.0e6
    names = SME_NAMES
    two_path, _, _ = harmonics.harmonics_at(setup_for(CHI, CavityPair(), rotation=True), t_ref,
                                            names=names)
    own, _, _ = harmonics.harmonics_at(setup_for(CHI, apparatus, rotation=True), t_ref,
                                       names=names)
    f = apparatus.two_path_factor(apparatus.default_units)
    assert f == pytest.approx(factor, rel=1e-12)
    want = factor * pairs(two_path)
    np.testing.assert_allclose(pairs(own), want, rtol=0,
                               atol=1e-12 * np.abs(want).max() + FLOOR * abs(factor))
    assert apparatus.observable(apparatus.default_units).startswith(apparatus.kind)


def test_ke_zz_b0_over_c0_at_sixty_degrees(monkeypatch):
    """At a 60 deg separation ke_ZZ also makes a B0: B0/C0 = -tan 30 deg = -0.577 (derived from
    the factor above); at 90 deg it makes C0 alone ([R-struct-ZZ])."""
    freeze_orbit(monkeypatch, 0.0)
    coef, _, _ = harmonics.harmonics_at(setup_for(CHI, CavityPair(path_separation_deg=60.0)),
                                        0.0, names=("ke_ZZ",))
    assert coef[IDX["B0"], 0] / coef[IDX["C0"], 0] == pytest.approx(-np.tan(np.radians(30.0)),
                                                                      rel=1e-12)


@pytest.mark.parametrize("sensitivity_hz", [1.0, -3.5])
def test_clock_harmonics_are_the_table_with_k_to_c_times_the_sensitivity(monkeypatch,
                                                                           sensitivity_hz):
    """docs/theory.md, "Direction-dependent clock": the harmonic table applies with K -> c and
    an overall factor S_nu, which is the clock's two-path factor ([R-clock-projection]).
    Intermediate axes: Q set to the identity (the closed form is in those axes)."""
    fix_pole(monkeypatch)
    clock = OrientedClock(sensitivity_hz=sensitivity_hz)
    setup = setup_for(CHI, clock, DirectionalClock())
    coef, _, labels = harmonics.harmonics_at(setup, 2.0e6)
    assert clock.two_path_factor("Hz") == sensitivity_hz
    for j, name in enumerate(labels):          # the cq_* use the component scheme of ke_*
        closed = fourier_table(*k_components(unit_ke(name.replace("cq_", "ke_"))), CHI)
        np.testing.assert_allclose(coef[:, j], sensitivity_hz * closed, rtol=0,
                                   atol=FLOOR * abs(sensitivity_hz))
    assert OrientedClock(axis="vertical").two_path_factor("Hz") == 0


def test_harmonic_table_states_observable_and_factor():
    table = harmonics.harmonic_table(setup_for(CHI, Michelson(arm_length_m=2.0)), 0.0,
                                     {"ke_XY": 1e-17}, n_orbit=2)
    d = table.to_dict()
    assert d["observable"].startswith("michelson fringe count")
    assert d["two_path_factor"] == pytest.approx([-2 * 2.0 / 633e-9, 0.0])
    assert "two-path harmonics: h_S = h / f" in table.summary()


@pytest.mark.parametrize("ot", [0.0, 1.0, 2.5])
def test_ktr_b0_through_the_rotation_velocity(monkeypatch, ot):
    """docs/theory.md, "The sidereal and annual harmonics" (derived): the Earth-rotation
    velocity beta_L gives ktr an annual B0 = 2 beta_L sin chi beta_Z ktr, beta_Z the SCCEF Z
    component of the orbital velocity over c (-beta sin eta cos Omega T on the circular orbit)."""
    freeze_orbit(monkeypatch, BETA_ORB, ot)
    setup = setup_for(CHI, rotation=True)
    beta_l = OMEGA_EARTH_RAD_S * setup.site.axis_distance_m / C_M_S
    coef, _, _ = harmonics.harmonics_at(setup, 0.0, names=("ktr",))
    beta_z = -BETA_ORB * np.sin(ETA) * np.cos(ot)
    closed = 2 * beta_l * np.sin(CHI) * beta_z
    # neglected: relative order beta (the next order of the boost) -> 10 beta of the value
    assert coef[IDX["B0"], 0] == pytest.approx(closed, rel=10 * BETA_ORB)
