"""Apparatus kinds, turntable schedules and the tilt ([R-SME-modes], [R-SME-two-path],
[R-clock-projection]; C6-C9). Anchors [R-...] are entries of docs/references.md."""

import numpy as np
import pytest

from fringe.constants import C_M_S
from fringe.errors import ConfigError
from fringe.experiment.apparatus import (
    APPARATUS_KINDS,
    CavityPair,
    CavityVsReference,
    Michelson,
    OrientedClock,
    make_apparatus,
)
from fringe.experiment.basis import Setup, basis, signal
from fringe.experiment.turntable import (
    AxisTilt,
    ContinuousRotation,
    SteppedRotation,
    table_to_lab,
    tilt_matrix,
)
from fringe.frames import Epoch, FrameState, circular_orbit_beta
from fringe.site import Site
from fringe.theories.clock import DirectionalClock
from fringe.theories.medium import ClassicalMedium
from fringe.theories.sme import SME_NAMES, SmePhoton
from tests.helpers import oracle

CHI = np.radians(37.48)                                   # [R-vec-common]
ETA = np.radians(23.4392794)                              # [R-vec-common]
SUN_MEDIUM = {"sun_vX_kms": -359.0, "sun_vY_kms": 76.7, "sun_vZ_kms": -44.7}   # ~CMB, invented
SME = SmePhoton()
# float64 floor of an SME signal: a ktr is an O(1) isotropic rest-frame tensor whose boosted
# anisotropy is only ~beta^2, so its response carries ~1e-16 x ktr of absolute rounding
KTR_ROUNDING = 1e-15


def setup_for(apparatus, theory=SME, tilt=None):
    return Setup(site=Site(latitude_deg=90.0 - np.degrees(CHI), longitude_deg=0.0),
                 epoch=Epoch("2026-01-01T00:00:00Z"), apparatus=apparatus, theory=theory,
                 tilt=tilt)


def random_state(rng, n, beta_scale=1.0):
    phi = rng.uniform(0, 2 * np.pi, n)
    beta = circular_orbit_beta(rng.uniform(0, 2 * np.pi, n), 9.93e-5 * beta_scale, ETA)
    return FrameState(phi, CHI, beta)


def random_sme(rng):
    return {n: rng.normal() * (1e-9 if n == "ktr" else 1e-13 if n.startswith("ko") else 1e-17)
            for n in SME_NAMES}


# ---- Michelson ----------------------------------------------------------------------------

def test_michelson_is_minus_two_l_over_lambda_times_s():
    rng = np.random.default_rng(1)
    state = random_state(rng, 20)
    az = rng.uniform(0, 2 * np.pi, 20)
    length, wavelength = 11.0, 550e-9
    pair = basis(setup_for(CavityPair()), np.zeros(20), az, state=state)
    mich = basis(setup_for(Michelson(arm_length_m=length, wavelength_m=wavelength)),
                 np.zeros(20), az, state=state)
    # [R-SME-two-path]: Delta N = -(2L/lambda) S, linearised (exact for the basis)
    np.testing.assert_allclose(mich, -(2 * length / wavelength) * pair, rtol=1e-13,
                               atol=1e-13 * np.abs(mich).max())


def test_michelson_exact_combine_agrees_with_linearised():
    rng = np.random.default_rng(2)
    state = random_state(rng, 30)
    az = rng.uniform(0, 2 * np.pi, 30)
    length, wavelength = 11.0, 550e-9
    medium = ClassicalMedium()
    exact = signal(setup_for(Michelson(arm_length_m=length, wavelength_m=wavelength), medium),
                   SUN_MEDIUM, np.zeros(30), az, state=state)
    s = signal(setup_for(CavityPair(), medium), SUN_MEDIUM, np.zeros(30), az, state=state)
    linear = -(2 * length / wavelength) * s
    dirs = np.stack([np.stack([-np.cos(az), np.sin(az), np.zeros(30)], -1),
                     np.stack([-np.cos(az + np.pi / 2), np.sin(az + np.pi / 2),
                               np.zeros(30)], -1)], axis=1)
    delta = np.abs(medium.path_shift(SUN_MEDIUM, dirs, state)).max()
    # exact minus linear = (2L/lambda)(d1^2 - d2^2)/(1 + d) ~ |d1 + d2| |linear| (derived)
    assert np.all(np.abs(exact - linear) <= 3 * delta * np.abs(linear) + 1e-15)
    assert np.abs(exact - linear).max() > 0.0         # the exact route is really used


def test_michelson_combine_formula_unequal_arms():
    app = Michelson(arm_length_m=2.0, wavelength_m=1e-6, passes=2, arm_length_2_m=3.0)
    d = np.array([[1e-3, -2e-3], [4e-4, 5e-4]])
    # C8 and the Michelson docstring (derived): t_i = 2 p L_i / (c (1 + d_i)), Delta N =
    # c (t1 - t2)/lambda minus the constant 2 p (L1 - L2)/lambda
    t1 = 2 * 2 * 2.0 / (C_M_S * (1 + d[:, 0]))
    t2 = 2 * 2 * 3.0 / (C_M_S * (1 + d[:, 1]))
    expected = C_M_S * (t1 - t2) / 1e-6 - 2 * 2 * (2.0 - 3.0) / 1e-6
    np.testing.assert_allclose(app.combine(d, "fringe"), expected, rtol=1e-9)


def test_michelson_passes_scale():
    rng = np.random.default_rng(3)
    state = random_state(rng, 5)
    az = rng.uniform(0, 2 * np.pi, 5)
    one = basis(setup_for(Michelson(arm_length_m=1.0, wavelength_m=1e-6)), np.zeros(5), az,
                state=state)
    three = basis(setup_for(Michelson(arm_length_m=1.0, wavelength_m=1e-6, passes=3)),
                  np.zeros(5), az, state=state)
    scale = 3 * 2 * 1.0 / 1e-6                                      # 2 p L / lambda
    np.testing.assert_allclose(three, 3 * one, rtol=1e-13, atol=KTR_ROUNDING * scale)


# ---- path geometry -------------------------------------------------------------------------

@pytest.mark.parametrize("theory, params", [(SME, None), (ClassicalMedium(), SUN_MEDIUM)],
                         ids=["sme", "medium"])
def test_second_path_sign_and_swap(theory, params):
    rng = np.random.default_rng(4)
    state = random_state(rng, 12)
    params = params or random_sme(rng)
    az = rng.uniform(0, 2 * np.pi, 12)

    def s(sep, azimuth):
        return signal(setup_for(CavityPair(path_separation_deg=sep), theory), params,
                      np.zeros(12), azimuth, state=state)

    ref = s(90.0, az)
    tol = 1e-14 * np.abs(ref).max() + KTR_ROUNDING * abs(params.get("ktr", 0.0))
    # [R-struct-second-path], derived (arithmetic): second path at +90 deg or
    # -90 deg (270): S unchanged
    np.testing.assert_allclose(s(-90.0, az), ref, rtol=1e-12, atol=tol)
    np.testing.assert_allclose(s(270.0, az), ref, rtol=1e-12, atol=tol)
    # [R-struct-swap], derived: swapping the two paths (or the beat nu2 - nu1): S -> -S
    np.testing.assert_allclose(s(-90.0, az + np.pi / 2), -ref, rtol=1e-12, atol=tol)


def test_path_separation_sixty_degrees():
    """Derived: path 2 at theta - alpha gives S_alpha(theta) = sin(a) S_90(theta + 45 - a/2).

    The 2theta part of n.T.n is C cos 2t + B sin 2t, so S_alpha = f(2theta) - f(2theta - 2alpha)
    with cos a - cos(a - 2 alpha) = -2 sin(alpha) sin(a - alpha) (and likewise for sin); for
    alpha = 60 deg this is (sqrt 3 / 2) S_90 at theta + 15 deg, i.e. at azimuth A - 15 deg.
    """
    rng = np.random.default_rng(5)
    state = random_state(rng, 16)
    params = random_sme(rng)
    az = rng.uniform(0, 2 * np.pi, 16)
    s60 = signal(setup_for(CavityPair(path_separation_deg=60.0)), params, np.zeros(16), az,
                 state=state)
    s90 = signal(setup_for(CavityPair()), params, np.zeros(16), az - np.radians(15.0),
                 state=state)
    np.testing.assert_allclose(s60, np.sqrt(3) / 2 * s90, rtol=1e-11,
                               atol=1e-13 * np.abs(s90).max() + KTR_ROUNDING * abs(params["ktr"]))


def test_fixed_reference_cavity():
    rng = np.random.default_rng(6)
    state = random_state(rng, 8)
    params = random_sme(rng)
    az = rng.uniform(0, 2 * np.pi, 8)
    got = signal(setup_for(CavityVsReference(reference=30.0)), params, np.zeros(8), az,
                 state=state)
    ref_dir = np.array([-np.cos(np.radians(30.0)), np.sin(np.radians(30.0)), 0.0])  # C7
    dirs = np.stack([np.stack([-np.cos(az), np.sin(az), np.zeros(8)], -1),
                     np.broadcast_to(ref_dir, (8, 3))], axis=1)
    shift = SME.path_shift(params, dirs, state)
    np.testing.assert_allclose(got, shift[:, 0] - shift[:, 1], rtol=1e-12,
                               atol=1e-14 * np.abs(got).max() + KTR_ROUNDING * abs(params["ktr"]))


def test_ring_mode_is_minus_half_fabry_perot():
    """[R-SME-modes]: a ring mode circulating in the plane normal to a has M = 1/4 (1 - a a)
    (delta nu / nu = M : K_lab) and responds with -1/2 of the Fabry-Perot response along a;
    mode_tensors take M in that documented normalisation."""
    rng = np.random.default_rng(7)
    state = random_state(rng, 10)
    az = rng.uniform(0, 2 * np.pi, 10)
    x, y = np.eye(3)[0], np.eye(3)[1]
    rings = (0.25 * (np.eye(3) - np.outer(x, x)), 0.25 * (np.eye(3) - np.outer(y, y)))
    fp = basis(setup_for(CavityPair()), np.zeros(10), az, state=state)
    ring = basis(setup_for(CavityPair(mode_tensors=rings)), np.zeros(10), az, state=state)
    np.testing.assert_allclose(ring, -0.5 * fp, rtol=1e-12, atol=1e-14 * np.abs(fp).max())


@pytest.mark.parametrize("separation_deg", [90.0, 60.0])
def test_documented_fabry_perot_tensors_reproduce_the_cavity_pair(separation_deg):
    """[R-SME-modes]: a Fabry-Perot mode along n has M = 1/2 n n (delta nu / nu = M : K_lab);
    given as mode_tensors, those tensors must give exactly the cavity-pair kind (paths at table
    angles 0 and -separation, C7/C8), for every SME coefficient."""
    rng = np.random.default_rng(8)
    state = random_state(rng, 12)
    az = rng.uniform(0, 2 * np.pi, 12)
    a2 = -np.radians(separation_deg)
    n1, n2 = np.array([1.0, 0.0, 0.0]), np.array([np.cos(a2), np.sin(a2), 0.0])
    tensors = (0.5 * np.outer(n1, n1), 0.5 * np.outer(n2, n2))
    pair = CavityPair(path_separation_deg=separation_deg)
    general = CavityPair(path_separation_deg=separation_deg, mode_tensors=tensors)
    want = basis(setup_for(pair), np.zeros(12), az, state=state)
    got = basis(setup_for(general), np.zeros(12), az, state=state)
    np.testing.assert_allclose(got, want, rtol=1e-13, atol=1e-15 * np.abs(want).max())


def test_documented_fabry_perot_tensor_keeps_the_isotropic_shift():
    """Against an atomic reference the isotropic ktr term stays ([R-SME-cavity]); the
    documented tensor 1/2 n n must give it in full, like the straight Fabry-Perot mode."""
    rng = np.random.default_rng(9)
    state = random_state(rng, 12)
    az = rng.uniform(0, 2 * np.pi, 12)
    params = random_sme(rng)
    n1 = np.array([1.0, 0.0, 0.0])
    want = signal(setup_for(CavityVsReference()), params, np.zeros(12), az, state=state)
    got = signal(setup_for(CavityVsReference(mode_tensors=(0.5 * np.outer(n1, n1),))), params,
                 np.zeros(12), az, state=state)
    np.testing.assert_allclose(got, want, rtol=1e-13,
                               atol=1e-14 * np.abs(want).max() + KTR_ROUNDING * abs(params["ktr"]))


# ---- tilt ----------------------------------------------------------------------------------

def rodrigues_up_to(axis):
    """Independent construction: rotation about z x a by the angle between z and a."""
    a = axis / np.linalg.norm(axis)
    k = np.cross([0.0, 0.0, 1.0], a)
    sin_t, cos_t = np.linalg.norm(k), a[2]
    if sin_t == 0.0:
        return np.eye(3)
    k /= sin_t
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    return cos_t * np.eye(3) + sin_t * kx + (1 - cos_t) * np.outer(k, k)


@pytest.mark.parametrize("south, east", [(0.0, 0.0), (1e-3, 0.0), (0.0, -2e-3), (0.05, 0.08)])
def test_tilt_matrix_is_the_rotation_to_the_tilted_axis(south, east):
    q = tilt_matrix(south, east)
    axis = np.array([np.tan(south), np.tan(east), 1.0])
    axis /= np.linalg.norm(axis)
    np.testing.assert_allclose(q @ q.T, np.eye(3), atol=1e-15)
    assert np.linalg.det(q) == pytest.approx(1.0, abs=1e-15)
    np.testing.assert_allclose(q @ [0.0, 0.0, 1.0], axis, atol=1e-15)
    np.testing.assert_allclose(q, rodrigues_up_to(axis), atol=1e-15)


def tilted_pair_signal(k_sccef, chi, phi, theta, south, east):
    """Oracle: S = 1/2 (n1 K n1 - n2 K n2) with n = Tilt Rz(theta) e (beta = 0)."""
    r = oracle.rot_sccef_to_lab(chi, phi)
    k_lab = r @ k_sccef @ r.T
    t = rodrigues_up_to(np.array([np.tan(south), np.tan(east), 1.0]))
    n1 = t @ [np.cos(theta), np.sin(theta), 0.0]
    n2 = t @ [np.sin(theta), -np.cos(theta), 0.0]        # path 2 at azimuth A + 90 deg (C8)
    return 0.5 * (n1 @ k_lab @ n1 - n2 @ k_lab @ n2), k_lab


def test_tilt_changes_the_signal_as_derived():
    rng = np.random.default_rng(8)
    params = {n: rng.normal() for n in ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ")}
    ke = np.array([[0.5 * (params["ke_XXmYY"] - params["ke_ZZ"]), params["ke_XY"],
                    params["ke_XZ"]],
                   [params["ke_XY"], -0.5 * (params["ke_XXmYY"] + params["ke_ZZ"]),
                    params["ke_YZ"]],
                   [params["ke_XZ"], params["ke_YZ"], params["ke_ZZ"]]])
    n = 32
    az = 2 * np.pi * np.arange(n) / n
    theta = np.pi - az
    phi = 1.3
    state = FrameState(np.full(n, phi), CHI, np.zeros((n, 3)))     # at rest: exact algebra

    def s(tilt):
        return signal(setup_for(CavityPair(), tilt=tilt), params, np.zeros(n), az, state=state)

    untilted = s(None)
    np.testing.assert_array_equal(s(AxisTilt(0.0, 0.0)), untilted)     # zero tilt: no change
    south, east = 1e-3, -6e-4
    tilted = s(AxisTilt(south, east))
    ref = np.array([tilted_pair_signal(ke, CHI, phi, t, south, east)[0] for t in theta])
    np.testing.assert_allclose(tilted, ref, rtol=1e-12, atol=1e-14)
    # Derived to first order in the tilt: n_z = -(s cos t + e sin t) for path 1, so
    # S_tilt - S = -(s K_xz - e K_yz) cos 2t - (s K_yz + e K_xz) sin 2t; neglected O(tilt^2).
    k_lab = tilted_pair_signal(ke, CHI, phi, 0.0, 0.0, 0.0)[1]
    kxz, kyz = k_lab[0, 2], k_lab[1, 2]
    first = (-(south * kxz - east * kyz) * np.cos(2 * theta)
             - (south * kyz + east * kxz) * np.sin(2 * theta))
    assert np.abs(first).max() > 1e-4                       # a visible change
    np.testing.assert_allclose(tilted - untilted, first, rtol=0,
                               atol=3 * (south ** 2 + east ** 2) * np.abs(k_lab).max())
    # a fixed tilt keeps the signal even under theta -> theta + pi (every response is even in
    # the path direction): no odd harmonics of the table angle
    spec = np.abs(np.fft.rfft(tilted))
    assert spec[1::2].max() <= 1e-13 * spec.max()


# ---- schedules -----------------------------------------------------------------------------

@pytest.mark.parametrize("sense, sign", [("ccw", 1.0), ("cw", -1.0)])
def test_continuous_rotation_sense(sense, sign):
    motion = ContinuousRotation(period_s=60.0, sense=sense, start_azimuth_deg=10.0)
    t = np.linspace(0.0, 120.0, 241)
    az = motion.azimuth_rad(t)
    theta = np.pi - az
    # C6: ccw seen from above -> d theta/dt > 0, i.e. the azimuth decreases
    assert np.all(sign * np.diff(theta) > 0)
    assert motion.rate_rad_s == pytest.approx(sign * 2 * np.pi / 60.0, rel=1e-15)
    assert az[-1] - az[0] == pytest.approx(-sign * 4 * np.pi, rel=1e-14)
    q = table_to_lab(az)
    n = q[:, :, 0]
    # path 1 turns about local up (+z): (n(t) x n(t + dt))_z > 0 for ccw, right-handed lab
    assert np.all(sign * np.cross(n[:-1], n[1:])[:, 2] > 0)
    assert not motion.dwelling(t).any()


def test_stepped_rotation_marks_and_period():
    motion = SteppedRotation(step_deg=22.5, dwell_s=10.0, move_s=5.0, start_azimuth_deg=0.0)
    assert motion.period_s == pytest.approx(16 * 15.0)              # 16 marks x 15 s
    t = np.arange(0.0, motion.period_s, 0.5)
    dwell = motion.dwelling(t)
    az = motion.azimuth_rad(t)
    into = t % 15.0
    np.testing.assert_array_equal(dwell, into < 10.0)
    marks = np.unique(np.round(az[dwell], 12))
    assert marks.size == 16
    np.testing.assert_allclose(np.sort(-marks), np.radians(22.5) * np.arange(16), atol=1e-12)
    # at rest during a dwell, moving in between, one full turn (decreasing azimuth, ccw) a period
    assert np.ptp(az[(t >= 15.0) & (t < 25.0)]) == 0.0
    assert np.all(np.diff(az[(t > 25.0) & (t < 30.0)]) < 0)
    assert motion.azimuth_rad(motion.period_s) == pytest.approx(-2 * np.pi, rel=1e-14)
    cw = SteppedRotation(step_deg=22.5, dwell_s=10.0, move_s=5.0, sense="cw")
    assert cw.azimuth_rad(cw.period_s) == pytest.approx(2 * np.pi, rel=1e-14)


def test_table_to_lab_maps_path_one():
    az = np.array([0.0, 0.4, np.pi / 2])
    q = table_to_lab(az)
    theta = np.pi - az
    np.testing.assert_allclose(q[:, :, 0], np.stack([np.cos(theta), np.sin(theta),
                                                     np.zeros(3)], -1), atol=1e-15)
    np.testing.assert_allclose(q[:, :, 2], np.broadcast_to([0.0, 0.0, 1.0], (3, 3)),
                               atol=1e-15)


# ---- clock ---------------------------------------------------------------------------------

CLOCK_PARAMS = {"cq_XY": 0.3, "cq_XZ": -0.7, "cq_YZ": 0.2, "cq_XXmYY": 1.1, "cq_ZZ": -0.4}


def clock_tensor(p):
    d, zz = p["cq_XXmYY"], p["cq_ZZ"]
    return np.array([[0.5 * (d - zz), p["cq_XY"], p["cq_XZ"]],
                     [p["cq_XY"], -0.5 * (d + zz), p["cq_YZ"]],
                     [p["cq_XZ"], p["cq_YZ"], zz]])


@pytest.mark.parametrize("chi_deg", [37.48, 121.98])
def test_clock_table_axis(chi_deg):
    chi = np.radians(chi_deg)
    rng = np.random.default_rng(9)
    phi = rng.uniform(0, 2 * np.pi, 6)
    az = rng.uniform(0, 2 * np.pi, 6)
    state = FrameState(phi, chi, np.zeros((6, 3)))
    setup = setup_for(OrientedClock(sensitivity_hz=2.5, axis="table"), DirectionalClock())
    got = signal(setup, CLOCK_PARAMS, np.zeros(6), az, state=state)
    c = clock_tensor(CLOCK_PARAMS)
    for g, p, a in zip(got, phi, az, strict=True):
        r = oracle.rot_sccef_to_lab(chi, p)
        c_lab = r @ c @ r.T
        t = np.pi - a
        q = np.array([np.cos(t), np.sin(t), 0.0])
        # [R-clock-projection]: delta nu = S q.c_lab.q = S [B_c sin 2t + C_c cos 2t - c_lab^zz / 2]
        assert g == pytest.approx(2.5 * q @ c_lab @ q, rel=1e-12)
        split = (c_lab[0, 1] * np.sin(2 * t) + 0.5 * (c_lab[0, 0] - c_lab[1, 1]) * np.cos(2 * t)
                 - 0.5 * c_lab[2, 2])
        assert g == pytest.approx(2.5 * split, rel=1e-12)


def test_clock_vertical_axis_formula():
    rng = np.random.default_rng(10)
    phi = rng.uniform(0, 2 * np.pi, 8)
    chi = np.radians(52.0)
    state = FrameState(phi, chi, np.zeros((8, 3)))
    setup = setup_for(OrientedClock(sensitivity_hz=-1.7, axis="vertical"), DirectionalClock())
    got = signal(setup, CLOCK_PARAMS, np.zeros(8), rng.uniform(0, 6, 8), state=state)
    c = clock_tensor(CLOCK_PARAMS)
    s2, sin2chi, c2 = np.sin(chi) ** 2, np.sin(2 * chi), np.cos(chi) ** 2
    # [R-clock-zz], derived: c_lab^zz = sin^2 chi [-1/2 c^ZZ + 1/2 (c^XX - c^YY) cos 2phi +
    # c^XY sin 2phi] + sin 2chi (c^XZ cos phi + c^YZ sin phi) + cos^2 chi c^ZZ
    czz = (s2 * (-0.5 * c[2, 2] + 0.5 * (c[0, 0] - c[1, 1]) * np.cos(2 * phi)
                 + c[0, 1] * np.sin(2 * phi))
           + sin2chi * (c[0, 2] * np.cos(phi) + c[1, 2] * np.sin(phi)) + c2 * c[2, 2])
    np.testing.assert_allclose(got, -1.7 * czz, rtol=1e-12, atol=1e-14)


def test_sector_mismatch_is_refused():
    with pytest.raises(ConfigError, match="sector"):
        setup_for(CavityPair(), DirectionalClock())
    with pytest.raises(ConfigError, match="sector"):
        setup_for(OrientedClock(), SME)


# ---- construction from attributes ------------------------------------------------------------

@pytest.mark.parametrize("app", [CavityPair(carrier_hz=2.8e14, path_separation_deg=-90.0),
                                 CavityVsReference(reference="atomic"),
                                 CavityVsReference(reference=45.0),
                                 Michelson(arm_length_m=11.0, wavelength_m=550e-9, passes=8),
                                 OrientedClock(sensitivity_hz=3.0, axis="vertical")],
                         ids=lambda a: a.kind)
def test_make_apparatus_round_trip(app):
    again = make_apparatus(app.attributes())
    assert type(again) is type(app)
    assert again.attributes() == app.attributes()
    assert set(APPARATUS_KINDS) == {"cavity-pair", "cavity-vs-reference", "michelson", "clock"}


@pytest.mark.parametrize("attrs, field", [({"kind": "sundial"}, "kind"),
                                          ({"kind": "michelson", "arm_m": 1.0}, "arm_m"),
                                          ({"kind": "michelson", "passes": 0}, "passes")])
def test_make_apparatus_errors_name_the_field(attrs, field):
    with pytest.raises(ConfigError, match=field):
        make_apparatus(attrs)
