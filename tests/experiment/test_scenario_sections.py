"""Unknown scenario sections and CSV-import metadata sections are errors naming the nearest."""

from __future__ import annotations

import copy

import pytest

from fringe.errors import ConfigError, InputFileError
from fringe.experiment.scenario import scenario_from_dict
from fringe.io.csvimport import read_import_metadata
from tests.helpers.runs import BASE


def test_misspelt_noise_section_is_refused_with_the_closest_match():
    # before: [nosie] was kept as an unread section and the campaign simulated without noise
    doc = copy.deepcopy(BASE)
    doc["nosie"] = doc.pop("noise")
    with pytest.raises(ConfigError) as info:
        scenario_from_dict(doc, "lab.toml")
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith("lab.toml: [nosie]: unknown section; did you mean [noise]? "
                              "(known: ")
    for name in ("apparatus", "campaign", "coefficients", "noise", "plan", "site",
                 "systematics", "theory", "turntable"):
        assert f"[{name}]" in message


def test_unknown_top_level_key_names_title():
    doc = {**copy.deepcopy(BASE), "titel": "a typo"}
    with pytest.raises(ConfigError, match=r"^lab.toml: titel: unknown top-level key; did you "
                                          r"mean title\? \(known: "):
        scenario_from_dict(doc, "lab.toml")


def test_unknown_section_without_a_close_match_lists_the_known_ones():
    doc = {**copy.deepcopy(BASE), "zzz": {"a": 1}}
    with pytest.raises(ConfigError) as info:
        scenario_from_dict(doc, "lab.toml")
    assert "did you mean" not in str(info.value)
    assert "[systematics]" in str(info.value)


def test_known_stage_sections_are_kept():
    doc = {**copy.deepcopy(BASE), "systematics": {"drift_per_day": 1e-15}, "plan": {}}
    sc = scenario_from_dict(doc, "lab.toml")
    assert set(sc.sections) == {"noise", "systematics", "plan"}


def test_import_metadata_section_closest_match(tmp_path):
    meta = tmp_path / "meta.toml"
    meta.write_text('[unit]\ntime = "s"\n', encoding="utf-8")
    with pytest.raises(InputFileError) as info:
        read_import_metadata(meta)
    assert str(info.value) == (f"{meta}: unit: unknown section; did you mean units? (known: "
                               "epoch_utc, site, apparatus, columns, units, csv, calibration, "
                               "gate, azimuth_log)")
