"""Blind analysis: the blinded file says nothing about the true values or the offsets.

Two simulated records share their noise exactly (one seed) and differ in their injected ke_*
(zero, and twice the invented KE_TRUTH: 10 to 30 sigma apart). Keys are drawn from fixed seed
bytes here (the command line draws them from os.urandom).
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from scipy.stats import ks_2samp

import fringe.fit.blinding as blinding
from fringe.errors import FringeWarning, InputFileError
from fringe.fit.blinding import blind_fit, settings_hash, unblind
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.turns_file import read_turns, write_turns
from tests.helpers.runs import KE_TRUTH, simulate_run

FREE = ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ")
N_KEYS = 200


def _leaves(d, prefix=""):
    if isinstance(d, dict):
        for k, v in d.items():
            yield from _leaves(v, f"{prefix}.{k}")
    elif isinstance(d, list):
        for i, v in enumerate(d):
            yield from _leaves(v, f"{prefix}[{i}]")
    else:
        yield prefix, d


@pytest.fixture(scope="module")
def two_truths(tmp_path_factory):
    """(result, columns) of the two records (same noise, different true coefficients)."""
    d = tmp_path_factory.mktemp("blind")
    out = []
    for name, truth in (("zero", {}), ("signal", {k: 2 * v for k, v in KE_TRUTH.items()})):
        path, *_ = simulate_run(d / f"{name}.h5", seed=7, days=1.0, coefficients=truth)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FringeWarning)
            out.append(fit_run(path, FitSettings(free=FREE)))
    yield out, d
    for _, columns in out:
        columns.close()


def _entropy(tag: str, i: int) -> bytes:
    return f"{tag}-{i}".encode().ljust(32, b".")


def _blinded_values(res, columns, tag):
    vals = {n: [] for n in FREE}
    harm = []
    for i in range(N_KEYS):
        b, _, _ = blind_fit(res, columns, entropy=_entropy(tag, i))
        for n in FREE:
            vals[n].append(b.coefficients[n].value)
        harm.append(b.harmonics.value)
    return vals, np.array(harm)


def test_the_true_values_differ_clearly(two_truths):
    """The control of the next test: unblinded, the two records differ by > 8 sigma in every
    coefficient (so indistinguishable blinded values are the blinding's doing)."""
    (a, _), (b, _) = two_truths[0]
    for n in FREE:
        assert abs(b.coefficients[n].value - a.coefficients[n].value) > 8 * a.coefficients[n].sigma


def test_blinded_values_do_not_reveal_the_true_ones(two_truths):
    """Over 200 keys each, the blinded coefficients and C10 harmonics of the two records have
    the same distribution: two-sample Kolmogorov-Smirnov p > 0.001 for every one of them
    ([R-stat-ks2]; the true difference is < 0.3 of the offsets' spread of 100 sigma, which
    200 keys resolve at ~1 sigma of the test). With a spread of 0.5 sigma the same test tells
    the records apart (p < 1e-10): it can fail."""
    (a, ca), (b, cb) = two_truths[0]
    va, ha = _blinded_values(a, ca, "a")
    vb, hb = _blinded_values(b, cb, "b")
    for n in FREE:
        assert ks_2samp(va[n], vb[n]).pvalue > 1e-3, n
    for j in range(ha.shape[1]):
        assert ks_2samp(ha[:, j], hb[:, j]).pvalue > 1e-3, j
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(blinding, "SPREAD_SIGMAS", 0.5)
        va, _ = _blinded_values(a, ca, "a")
        vb, _ = _blinded_values(b, cb, "b")
    for n in FREE:
        assert ks_2samp(va[n], vb[n]).pvalue < 1e-10, n


#: Fields of a blinded result that carry the offsets (by design) or the key's id.
BLINDED_FIELDS = ("coefficients.", "harmonics.value", "likelihood.value", "blinding.key_id",
                  "notes")


def _differing(x: dict, y: dict, rtol: float = 0.0) -> list[str]:
    a, b = dict(_leaves(x)), dict(_leaves(y))
    assert a.keys() == b.keys()
    out = []
    for k, v in a.items():
        w = b[k]
        if isinstance(v, float) and isinstance(w, float):
            if abs(v - w) > rtol * max(abs(v), abs(w)):
                out.append(k)
        elif v != w:
            out.append(k)
    return out


def test_only_the_blinded_fields_depend_on_the_key(two_truths):
    """Two keys on one fit: only the coefficient values (also in the likelihood), the
    harmonics' values, the key id and the note naming it differ; no number of the file equals
    an offset or a true value."""
    (a, ca), _ = two_truths[0]
    k1 = blind_fit(a, ca, entropy=_entropy("k", 1))
    k2 = blind_fit(a, ca, entropy=_entropy("k", 2))
    diff = _differing(k1[0].to_dict(), k2[0].to_dict())
    assert diff and all(k.lstrip(".").startswith(BLINDED_FIELDS) for k in diff), diff
    assert all(k.endswith(".value") for k in diff if k.startswith(".coefficients"))
    k_free = k1[0].likelihood.n_coefficients          # the likelihood's nuisances stay as they are
    assert all(int(k[len(".likelihood.value["):-1]) < k_free for k in diff
               if k.startswith(".likelihood"))
    numbers = {v for _, v in _leaves(k1[0].to_dict()) if isinstance(v, float)}
    secrets = set(k1[2].offsets.values()) | set(k1[2].harmonic_offsets)
    truths = {e.value for e in a.coefficients.values()} | set(a.harmonics.value)
    assert not numbers & secrets and not numbers & truths


def test_the_rest_of_the_file_does_not_depend_on_the_truth(two_truths):
    """One key on both records: every field but the blinded ones, the input's name and hash
    (also in the settings hash) and the creation time agrees to 1e-3 of its size (measured:
    <= 3e-5; the sigmas and chi^2 follow the noise, not the signal, and their own scatter is
    ~ 1/sqrt(86 400 samples) = 3e-3); covariance entries to 1e-3 of sqrt(var_i var_j)."""
    (a, ca), (b, cb) = two_truths[0]
    da = blind_fit(a, ca, entropy=_entropy("same", 0))[0].to_dict()
    db = blind_fit(b, cb, entropy=_entropy("same", 0))[0].to_dict()
    rest = [k for k in _differing(da, db, rtol=1e-3)
            if not k.lstrip(".").startswith(BLINDED_FIELDS + (
                "input.", "blinding.settings_sha256", "created_utc", "covariance.matrix",
                "harmonics.covariance", "likelihood.covariance"))]
    assert not rest, rest
    for key in ("covariance", "harmonics", "likelihood"):
        m1 = np.array(da[key]["matrix" if key == "covariance" else "covariance"])
        m2 = np.array(db[key]["matrix" if key == "covariance" else "covariance"])
        scale = np.sqrt(np.outer(np.diag(m1), np.diag(m1)))
        assert np.all(np.abs(m1 - m2) <= 1e-3 * scale)


def test_turns_file_is_blinded_consistently(two_truths, tmp_path):
    """The per-turn file of a blinded fit: C and the model move together (residuals equal to
    the unblinded ones to 1e-9 of sigma_C), every other column is the unblinded one, rejected
    turns' C, B are withheld; the harmonics move by the key's harmonic offsets."""
    (a, ca), _ = two_truths[0]
    blinded, cols, key = blind_fit(a, ca, entropy=_entropy("t", 0))
    write_turns(tmp_path / "b.h5", units="Hz", epoch_utc=a.epoch_utc, columns=cols)
    write_turns(tmp_path / "u.h5", units="Hz", epoch_utc=a.epoch_utc, columns=ca)
    tb, tu = read_turns(tmp_path / "b.h5"), read_turns(tmp_path / "u.h5")
    acc = tu["accepted"].astype(bool)
    for c, m in (("C", "model_C"), ("B", "model_B")):
        res_b, res_u = tb[c][acc] - tb[m][acc], tu[c][acc] - tu[m][acc]
        assert np.max(np.abs(res_b - res_u)) < 1e-9 * np.min(tu["sigma_C"][acc])
        assert np.all(np.isnan(tb[c][~acc]))
        assert not np.allclose(tb[c][acc], tu[c][acc])
    for name in ("t_mid_s", "phi_rad", "sigma_C", "sigma_B", "accepted", "residual_rms"):
        assert np.array_equal(tb[name], tu[name])
    np.testing.assert_allclose(np.array(blinded.harmonics.value) - np.array(a.harmonics.value),
                               key.harmonic_offsets, rtol=1e-9, atol=1e-15)


def test_unblind_restores_the_values_once(two_truths):
    """Unblinding gives back the unblinded fit's values (to 1e-9 sigma), records when and the
    settings hash, and refuses a used key and another result."""
    (a, ca), (b, cb) = two_truths[0]
    blinded, _, key = blind_fit(a, ca, entropy=_entropy("u", 0))
    key = key.bound_to("ab" * 32)
    plain, used = unblind(blinded, key, "ab" * 32)
    for n in FREE:
        assert abs(plain.coefficients[n].value - a.coefficients[n].value) < \
            1e-9 * a.coefficients[n].sigma
    np.testing.assert_allclose(plain.harmonics.value, a.harmonics.value, rtol=1e-9,
                               atol=1e-12)
    assert plain.blinding.blinded is False
    assert plain.blinding.settings_sha256_at_unblinding == settings_hash(a)
    assert used.unblinded["settings_sha256"] == settings_hash(a)
    with pytest.raises(InputFileError, match="unused key"):
        unblind(blinded, used, "ab" * 32)
    with pytest.raises(InputFileError, match="result_sha256"):
        unblind(blinded, key, "cd" * 32)
    other, _, _ = blind_fit(b, cb, entropy=_entropy("u", 1))
    with pytest.raises(InputFileError, match="key of this result"):
        unblind(other, key, "ab" * 32)


def test_spread_is_documented_multiple_of_sigma(two_truths):
    """The offsets scatter as a normal law of SPREAD_SIGMAS x sigma: over 200 keys their
    standard deviation in units of sigma x SPREAD_SIGMAS is 1 within 4 x 1/sqrt(2 x 200)."""
    (a, ca), _ = two_truths[0]
    z = {n: [] for n in FREE}
    for i in range(N_KEYS):
        key, o = blinding.draw_key(a, _entropy("s", i))
        for j, n in enumerate(FREE):
            z[n].append(o[j] / (blinding.SPREAD_SIGMAS * a.coefficients[n].sigma))
    for n in FREE:
        assert abs(np.std(z[n]) - 1.0) < 4 / math.sqrt(2 * N_KEYS)


def test_json_of_blinded_result_reads_back(two_truths):
    """The blinding part round-trips through the result file's reader."""
    from fringe.io.fit_result import FitResult

    (a, ca), _ = two_truths[0]
    blinded = blind_fit(a, ca, entropy=_entropy("j", 0))[0]
    again = FitResult.from_dict(json.loads(json.dumps(blinded.to_dict())))
    assert again.blinding == blinded.blinding and again.blinding.blinded
    assert again.summary().startswith("*** BLINDED")
