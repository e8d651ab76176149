"""Command-line behaviour: predict, simulate, inspect, fit; errors are one line, exit 2."""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from fringe.cli import main
from fringe.io.runreader import open_run

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "cavity_pair.toml"


def _sha(path):
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def _short_scenario(tmp_path, extra="", days=0.25):
    text = EXAMPLE.read_text().replace("duration_days = 2.0", f"duration_days = {days}")
    p = tmp_path / "sc.toml"
    p.write_text(text + extra)
    return p


def _intermediate_xy(utc):
    """(Q K Qᵀ)^XY for a unit ke_XY, Q = erfa.c2i06a at the UTC instant ``utc``."""
    import erfa

    date, clock = utc.rstrip("Z").split("T")
    y, mo, dd = (int(x) for x in date.split("-"))
    h, mi, s = clock.split(":")
    tt = erfa.taitt(*erfa.utctai(*erfa.dtf2d("UTC", y, mo, dd, int(h), int(mi), float(s))))
    q = erfa.c2i06a(*tt)
    k = np.zeros((3, 3))
    k[0, 1] = k[1, 0] = 1.0
    return float((q @ k @ q.T)[0, 1])


def test_predict_writes_table_figure_and_series(tmp_path):
    sc = _short_scenario(tmp_path)
    before = _sha(sc)
    res = CliRunner().invoke(main, ["predict", str(sc), "--set", "ke_XY=1e-17", "--out",
                                    str(tmp_path / "p")])
    assert res.exit_code == 0, res.output
    for name in ("harmonics.json", "harmonics.txt", "signal_map.png", "signal_map.pdf",
                 "prediction.h5"):
        assert (tmp_path / "p" / name).stat().st_size > 0
    assert _sha(sc) == before                                   # input untouched
    d = json.loads((tmp_path / "p" / "harmonics.json").read_text())
    chi = math.radians(90.0 - 47.62)
    # docs/references.md [R-lab-fourier] (derived): C_s2 = 1/2 (1 + cos^2 chi) K^XY,
    # B_c2 = cos chi K^XY, with K the tensor in the intermediate axes of the reference instant,
    # Q K Qᵀ ([R-time-earth-orientation]; Q from pyerfa 2.0.1.5 c2i06a at TT);
    # the table is in Hz (carrier 2.82e14 Hz); rtol 1e-6 covers the O(beta^2) boost terms
    k_xy = _intermediate_xy(d["harmonics"]["t_ref_utc"]) * 1e-17 * 2.82e14
    cs2 = d["harmonics"]["contribution"]["ke_XY"]["Cs2"]
    bc2 = d["harmonics"]["contribution"]["ke_XY"]["Bc2"]
    assert cs2 == pytest.approx(0.5 * (1 + math.cos(chi) ** 2) * k_xy, rel=1e-6, abs=0)
    assert bc2 == pytest.approx(math.cos(chi) * k_xy, rel=1e-6, abs=0)
    assert "Cs2" in res.output and "wrote" in res.output


def test_noise_free_simulation_equals_predict(tmp_path):
    sc = _short_scenario(tmp_path, "\n[noise]\nwhite_fm_adev_1s = 1e-15\n")
    r = CliRunner()
    assert r.invoke(main, ["predict", str(sc), "--out", str(tmp_path / "p")]).exit_code == 0
    res = r.invoke(main, ["simulate", str(sc), "--out", str(tmp_path / "s.h5"), "--seed", "1",
                          "--noise-free"])
    assert res.exit_code == 0, res.output
    with open_run(tmp_path / "p" / "prediction.h5") as a, open_run(tmp_path / "s.h5") as b:
        da, db = a.read_all(), b.read_all()
    for k in ("time", "azimuth", "signal"):
        np.testing.assert_array_equal(da[k], db[k])


def test_simulate_is_reproducible_and_refuses_overwrite(tmp_path):
    sc = _short_scenario(tmp_path, "\n[noise]\nwhite_fm_adev_1s = 1e-15\n", days=0.05)
    r = CliRunner()
    for name in ("a.h5", "b.h5"):
        assert r.invoke(main, ["simulate", str(sc), "--out", str(tmp_path / name),
                               "--seed", "7"]).exit_code == 0
    with open_run(tmp_path / "a.h5") as a, open_run(tmp_path / "b.h5") as b:
        np.testing.assert_array_equal(a.read_all()["signal"], b.read_all()["signal"])
    res = r.invoke(main, ["simulate", str(sc), "--out", str(tmp_path / "a.h5"), "--seed", "7"])
    assert res.exit_code == 2
    assert "exists" in res.output and "Traceback" not in res.output


@pytest.mark.parametrize("edit, needle", [
    (("latitude_deg = 47.62", "latitude_deg = 95.0"), "latitude_deg"),
    (("kind = \"cavity-pair\"", "kind = \"sundial\""), "kind"),
    (("period_s = 45.0", "period_s = -1"), "period_s"),
    (("ke_XY = 1e-17", "ke_QQ = 1e-17"), "ke_QQ"),
    (("start_utc = \"2027-02-03T00:00:00Z\"", "start_utc = \"yesterday\""), "start_utc"),
])
def test_bad_scenario_gives_one_line_error(tmp_path, edit, needle):
    p = tmp_path / "bad.toml"
    p.write_text(EXAMPLE.read_text().replace(*edit))
    res = CliRunner().invoke(main, ["predict", str(p), "--out", str(tmp_path / "o")])
    assert res.exit_code == 2
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and needle in lines[0] and "bad.toml" in lines[0]
    assert not (tmp_path / "o" / "harmonics.json").exists()


def test_inspect_and_fit_cli(tmp_path):
    sc = _short_scenario(tmp_path, "\n[noise]\nwhite_fm_adev_1s = 1e-15\n", days=0.5)
    r = CliRunner()
    assert r.invoke(main, ["simulate", str(sc), "--out", str(tmp_path / "r.h5"),
                           "--seed", "2"]).exit_code == 0
    before = _sha(tmp_path / "r.h5")
    res = r.invoke(main, ["inspect", str(tmp_path / "r.h5"), "--out", str(tmp_path / "i")])
    assert res.exit_code == 0, res.output
    assert "turns:" in res.output and (tmp_path / "i" / "allan.png").exists()
    res = r.invoke(main, ["fit", str(tmp_path / "r.h5"), "--out", str(tmp_path / "f.json"),
                          "--free", "ke_XY,ke_XXmYY"])
    assert res.exit_code == 0, res.output
    d = json.loads((tmp_path / "f.json").read_text())
    assert d["fringe_format"] == "fit" and set(d["coefficients"]) == {"ke_XY", "ke_XXmYY"}
    assert d["input"]["sha256"] == before == _sha(tmp_path / "r.h5")
    assert (tmp_path / "f.turns.h5").exists()


def test_invalid_run_file_one_line(tmp_path):
    bad = tmp_path / "junk.h5"
    bad.write_bytes(b"not an hdf5 file at all")
    for cmd in (["inspect", str(bad)], ["fit", str(bad), "--out", str(tmp_path / "f.json")]):
        res = CliRunner().invoke(main, cmd)
        assert res.exit_code == 2
        lines = [ln for ln in res.output.splitlines() if ln.strip()]
        assert len(lines) == 1 and "junk.h5" in lines[0] and "Traceback" not in res.output
    assert bad.read_bytes() == b"not an hdf5 file at all"
