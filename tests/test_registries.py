"""Registries drive the choices: the CLI's choice lists, the "unknown name" messages, and what is
asked of a theory (asked of its class, never of its name)."""

from __future__ import annotations

import copy

import click
import pytest

from fringe.cli import main
from fringe.cli.common import RegistryChoice
from fringe.demodulate.engine import ENGINES
from fringe.demodulate.settings import DRIFT_TERMS, DemodSettings
from fringe.errors import ConfigError
from fringe.experiment.apparatus import (
    APPARATUS_KINDS,
    CavityPair,
    CavityVsReference,
    Michelson,
    OrientedClock,
    make_apparatus,
)
from fringe.experiment.scenario import scenario_from_dict
from fringe.fit.settings import UNCERTAINTY_MODES
from fringe.io.runformat import APPARATUS_KINDS as FILE_KINDS
from fringe.theories import THEORIES, make_theory
from fringe.theories.sme import KE_NAMES, KO_NAMES

#: An invented laboratory (no real site), as in examples/cavity_pair.toml.
BASE = {
    "site": {"latitude_deg": 47.62, "longitude_deg": 11.38, "height_m": 610.0},
    "campaign": {"start_utc": "2027-02-03T00:00:00Z", "duration_days": 1.0,
                 "sample_interval_s": 1.0},
    "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.82e14, "units": "Hz"},
    "turntable": {"motion": "continuous", "period_s": 45.0},
}

# ------------------------------------------------------------------------------ the CLI


def option(command: str, flag: str) -> click.Option:
    for p in main.commands[command].params:
        if flag in p.opts:
            return p
    raise KeyError(flag)


@pytest.mark.parametrize("command, flag, registry", [
    ("fit", "--theory", THEORIES),
    ("fit", "--uncertainty", UNCERTAINTY_MODES),
    ("fit", "--drift", DRIFT_TERMS),
    ("fit", "--engine", ENGINES),
])
def test_cli_choices_are_the_registries(command, flag, registry):
    p = option(command, flag)
    assert isinstance(p.type, RegistryChoice)
    assert list(p.type.choices) == list(registry)
    assert p.default in registry


def test_every_cli_choice_comes_from_a_registry():
    plain = [(name, p.name) for name, cmd in main.commands.items() for p in cmd.params
             if isinstance(p.type, click.Choice) and not isinstance(p.type, RegistryChoice)]
    assert not plain, f"choice lists written into the CLI: {plain}"


def test_cli_refuses_an_unknown_name_listing_the_registry(tmp_path):
    from click.testing import CliRunner

    out = CliRunner().invoke(main, ["fit", str(tmp_path / "run.h5"), "--out",
                                    str(tmp_path / "fit.json"), "--theory", "ether"])
    assert out.exit_code == 2
    assert all(repr(n) in out.output for n in THEORIES)


# -------------------------------------------------------------- "unknown name" messages

@pytest.mark.parametrize("build, registry", [
    (lambda: make_theory("ether"), THEORIES),
    (lambda: DemodSettings(drift="cubic"), DRIFT_TERMS),
    (lambda: make_apparatus({"kind": "sextant"}), APPARATUS_KINDS),
])
def test_unknown_names_list_the_registry(build, registry):
    with pytest.raises(ConfigError) as info:
        build()
    assert all(name in str(info.value) for name in registry)


def test_file_kinds_are_the_apparatus_kinds():
    assert list(FILE_KINDS) == list(APPARATUS_KINDS)


# ------------------------------------------------------------- what a theory is asked

@pytest.mark.parametrize("name", list(THEORIES))
def test_theory_attributes_name_its_own_coefficients(name):
    cls = THEORIES[name]
    assert cls.name == name
    assert cls.primary_names and set(cls.primary_names) <= set(cls.parameter_names)
    assert set(cls.annual_names) <= set(cls.parameter_names)
    assert not set(cls.annual_names) & set(cls.primary_names)
    assert set(cls.parameter_units) == set(cls.parameter_names)
    for frame, values in cls.rest_frames.items():
        assert set(values()) <= set(cls.parameter_names), frame


def former_default_free(theory, apparatus, span_days):
    """fringe.fit.settings.default_free as it read before it asked the theory (reference)."""
    name = theory.name
    if name == "sme":
        return KE_NAMES + (KO_NAMES if span_days >= 182.6 else ())
    if name == "rms":
        atomic = (apparatus.kind == "cavity-vs-reference"
                  and getattr(apparatus, "reference", None) == "atomic")
        return ("rms_mm", "rms_kt") if atomic else ("rms_mm",)
    return theory.parameter_names


APPARATUS = [CavityPair(carrier_hz=1e14), CavityVsReference(carrier_hz=1e14),
             CavityVsReference(carrier_hz=1e14, reference=30.0), Michelson(),
             OrientedClock()]


@pytest.mark.parametrize("name", list(THEORIES))
@pytest.mark.parametrize("apparatus", APPARATUS, ids=lambda a: a.kind)
@pytest.mark.parametrize("span_days", [0.5, 182.5, 182.6, 400.0])
def test_default_free_is_unchanged(name, apparatus, span_days):
    theory = make_theory(name)
    assert theory.default_free(span_days, apparatus) == \
        former_default_free(theory, apparatus, span_days)


def scenario(theory: dict, coefficients: dict | None = None):
    doc = copy.deepcopy(BASE)
    doc["theory"] = theory
    doc["coefficients"] = coefficients or {}
    return scenario_from_dict(doc, "test scenario")


def test_scenario_theory_options_go_to_the_theory_class():
    sc = scenario({"name": "rms", "preferred_frame": [300.0, 0.0, 0.0]})
    # c = 299 792 458 m/s exactly (SI definition of the metre)
    assert sc.theory.sun_velocity_beta[0] == pytest.approx(300e3 / 299_792_458.0, rel=1e-15)
    sc = scenario({"name": "medium", "wave_speed_m_s": 2.0e8}, {"rest_frame": "cmb"})
    assert sc.theory.wave_speed_m_s == 2.0e8
    assert set(sc.coefficients) == set(THEORIES["medium"].parameter_names)
    with pytest.raises(ConfigError, match=r"\[theory\] wave_speed_m_s: unknown option for "
                                          r"theory 'rms'"):
        scenario({"name": "rms", "wave_speed_m_s": 2.0e8})
    with pytest.raises(ConfigError, match=r"\[theory\] preferred_frame: expected"):
        scenario({"name": "rms", "preferred_frame": "sun"})


def test_an_unknown_rest_frame_is_refused():
    with pytest.raises(ConfigError, match=r"\[coefficients\] rest_frame: expected one of 'cmb'"):
        scenario({"name": "medium"}, {"rest_frame": "galaxy"})
    # a theory without named rest frames: rest_frame is not one of its coefficients
    with pytest.raises(ConfigError, match="rest_frame: unknown coefficient of theory 'sme'"):
        scenario({"name": "sme"}, {"rest_frame": "cmb"})


def test_report_statements_are_keyed_by_registered_theory_classes():
    from fringe.report import documents

    assert set(documents._HEADLINES) <= set(THEORIES.values())
    assert set(documents._THEORY_SECTIONS) <= set(THEORIES.values())
