"""Two-device records end to end: counter log + encoder log against the same record in one file.

The invented example of ``examples/two_device/`` (a simulated cavity pair, a counter that
averages over its gate and stamps the gate's end on its own clock, an encoder with its own clock
and rate) is written into tmp_path, imported both ways (two CSV files merged, and one
synchronous CSV), and fitted. The two fits must agree within 0.1 sigma (issue 13); the gate
correction must scale the coefficients by exactly 1/H(2 Omega) ([R-gate-Pi], [R-gate-Lambda]).
"""

from __future__ import annotations

import importlib.util
import warnings
from pathlib import Path

import numpy as np
import pytest

from fringe.demodulate.gate import gate_factor
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.csvimport import import_csv
from fringe.io.fit_result import FitResult

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "two_device" / \
    "make_two_device_example.py"


def _example_module():
    spec = importlib.util.spec_from_file_location("two_device_example", EXAMPLE)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _fit(path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")          # SystematicsWarning etc. are not the subject
        res, cols = fit_run(str(path), FitSettings())
    cols.close()
    return res


@pytest.fixture(scope="module", params=["plain", "overlapping"])
def example(request, tmp_path_factory):
    out = tmp_path_factory.mktemp(f"two_device_{request.param}")
    got = _example_module().write_example(str(out), days=0.5, gate_s=2.0, kind=request.param,
                                          seed=11)
    p = got["paths"]
    two = import_csv(p["counter.csv"], out / "two.h5", metadata=p["two_device.toml"],
                     azimuth_log=p["encoder.csv"])
    one = import_csv(p["synchronous.csv"], out / "one.h5", metadata=p["synchronous.toml"])
    return {"out": out, "kind": request.param, "two": two, "one": one, "truth": got["truth"]}


def test_two_device_import_equals_the_synchronous_file(example):
    from fringe.io.runreader import open_run

    with open_run(example["two"].out_path) as a, open_run(example["one"].out_path) as b:
        assert a.format_version == b.format_version == 2
        assert a.signal_attrs == b.signal_attrs == {"gate_s": 2.0, "gate_kind": example["kind"]}
        x, y = a.read_all(), b.read_all()
    assert example["two"].n_dropped == 0
    np.testing.assert_allclose(x["time"], y["time"], rtol=0, atol=1e-6)   # 6 decimals written
    np.testing.assert_array_equal(x["signal"], y["signal"])
    d = np.angle(np.exp(1j * (x["azimuth"] - y["azimuth"])))
    # encoder values written to 1e-6 deg and interpolated linearly on a linear motion
    assert np.abs(d).max() < np.radians(2e-6)


def test_two_device_fit_agrees_with_the_synchronous_file_within_a_tenth_sigma(example):
    a, b = _fit(example["two"].out_path), _fit(example["one"].out_path)
    assert list(a.coefficients) == list(b.coefficients)
    for name, ea in a.coefficients.items():
        eb = b.coefficients[name]
        assert abs(ea.value - eb.value) < 0.1 * eb.sigma, name         # issue 13's criterion
        assert ea.sigma == pytest.approx(eb.sigma, rel=1e-3)
    assert a.calibration is not None and a.calibration.gate_kind == example["kind"]
    assert any("gate averaging" in n for n in a.notes)
    back = FitResult.from_dict(a.to_dict(), source="round trip")
    assert back.calibration == a.calibration


def test_gate_correction_scales_the_coefficients_by_the_closed_form_factor(example, tmp_path):
    """Declared gate vs none on the same file: every coefficient divided by H(2 Omega).

    The table turns at a constant 30 s period, so every turn gets the same factor and the
    coefficients (linear in the per-turn amplitudes) scale by exactly 1/H; the closed form is
    sinc(Omega tau) (plain) or its square (overlapping), [R-gate-Pi], [R-gate-Lambda] (derived).
    """
    p = {k: str(example["out"] / k) for k in ("synchronous.csv", "synchronous.toml")}
    bare = import_csv(p["synchronous.csv"], tmp_path / "bare.h5", metadata=p["synchronous.toml"])
    with_gate = _fit(example["one"].out_path)
    import h5py

    with h5py.File(bare.out_path, "r+") as f:           # the same file with the gate removed
        for key in ("gate_s", "gate_kind"):
            del f["samples/signal"].attrs[key]
        f.attrs["fringe_format_version"] = 1
    without = _fit(bare.out_path)
    period = with_gate.calibration.turn_period_s
    h2 = float(gate_factor(2 * 2 * np.pi / period, 2.0, example["kind"]))
    assert with_gate.calibration.gate_factor_2theta == pytest.approx(h2, rel=1e-12)
    omega_tau_half = 2 * np.pi / 30.0 * 2.0      # 2 theta: omega = 4 pi / 30 s, tau = 2 s
    closed = np.sin(omega_tau_half) / omega_tau_half
    closed = closed if example["kind"] == "plain" else closed ** 2
    assert h2 == pytest.approx(closed, rel=1e-6)    # period estimate of a 30 s table
    for name, e in with_gate.coefficients.items():
        assert e.value == pytest.approx(without.coefficients[name].value / h2, rel=1e-6), name
        assert e.sigma == pytest.approx(without.coefficients[name].sigma / h2, rel=1e-6), name


def test_scale_uncertainty_is_stated_per_coefficient(example, tmp_path):
    """Readings in counter units with a 2 % calibration: scale_sigma = 0.02 x |value|."""
    p = {k: str(example["out"] / k) for k in ("synchronous.csv", "synchronous.toml")}
    text = Path(p["synchronous.csv"]).read_text("utf-8").splitlines()
    lines = text[:2] + [",".join(row.split(",")[:2] + [repr(float(row.split(",")[2]) * 4.0)])
                        for row in text[2:]]
    counts = tmp_path / "counts.csv"
    counts.write_text("\n".join(lines) + "\n", "utf-8")
    run = import_csv(counts, tmp_path / "counts.h5", metadata=p["synchronous.toml"],
                     calibration={"scale_factor": 0.25, "scale_rel_sigma": 0.02,
                                  "instrument_units": "counts"})
    res = _fit(run.out_path)
    ref = _fit(example["one"].out_path)
    cal = res.calibration
    assert (cal.scale_factor, cal.scale_rel_sigma, cal.instrument_units) == (0.25, 0.02,
                                                                             "counts")
    for name, e in res.coefficients.items():
        assert e.value == pytest.approx(ref.coefficients[name].value, rel=1e-9)  # x4 x 0.25
        assert cal.scale_sigma[name] == pytest.approx(0.02 * abs(e.value), rel=1e-12)
    assert "relative scale uncertainty 0.02" in " ".join(res.notes)
