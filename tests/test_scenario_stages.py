"""Scenario files with schedules and actions: parsing, errors with key paths, fuzzing."""
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, example, given, settings, strategies as st

from transport.scenario.schema import ScenarioError, parse_scenario
from transport.model.schedules import Schedule

from test_scenario import _paths, _values, mutate, parses_or_raises_scenario_error

ROOT = Path(__file__).resolve().parent.parent
BASE = (ROOT / "scenarios" / "alternatives" / "3-clay-cap.toml").read_text(encoding="utf-8")
YEAR = 365.25 * 86400.0


def _with(text_extra, base=BASE):
    return parse_scenario(base + "\n" + text_extra, path="case.toml")


def test_actions_build_a_timeline_with_depths_above_the_original_top():
    sc = parse_scenario(BASE, path="cap.toml")
    stages = sc.timeline.stages
    # three actions at 1 yr, applied in the order written, make one stage
    assert [s.label for s in stages[1:]] == ["remove-source + place-cap + set-flow"]
    assert stages[1].offset == pytest.approx(-0.5)  # 0.5 m cap above the original top
    assert stages[1].carry[0] is None  # the cap starts clean
    assert stages[1].column.top.kind == "sealed"
    assert stages[1].column.darcy_flux == pytest.approx(0.01 / YEAR, rel=1e-12)
    assert sc.output.depths.min() == pytest.approx(-0.5)


def test_schedule_values_are_parsed_in_si():
    """1 yr = 365.25 d (Julian year, IAU); 1 mg/L = 1e-3 kg/m3 (SI)."""
    text = BASE.replace('concentration = "120 mg/L"',
                        'concentration = { steps = [["0 yr", "120 mg/L"], ["3 yr", "10 mg/L"]] }')
    sc = parse_scenario(text, path="s.toml")
    sched = sc.column.top.schedule
    assert isinstance(sched, Schedule)
    np.testing.assert_allclose(sched.value(np.array([1.0, 4.0]) * YEAR), [0.12, 0.01])
    text = BASE.replace('concentration = "120 mg/L"',
                        'concentration = { initial = "120 mg/L", half_life = "8 yr" }')
    sched = parse_scenario(text, path="s.toml").column.top.schedule
    assert sched.value(np.array([8 * YEAR]))[0] == pytest.approx(0.06, rel=1e-12)


@pytest.mark.parametrize("extra, key", [
    ('[[actions]]\nat = "500 yr"\nkind = "remove-source"', "actions[4].at"),
    ('[[actions]]\nat = "2 yr"\nkind = "excavate"\ndepth = "9 m"', "actions[4].depth"),
    ('[[actions]]\nat = "2 yr"\nkind = "amend-layer"\nlayer = "peat"\nhalf_life = "1 yr"',
     "actions[4].layer"),
    ('[[actions]]\nat = "2 yr"\nkind = "dig"', "actions[4].kind"),
    ('[[actions]]\nat = "0.5 yr"\nkind = "remove-source"', "actions[4].at"),
    ('[[actions]]\nat = "2 m"\nkind = "remove-source"', "actions[4].at"),
])
def test_bad_actions_name_the_key(extra, key):
    with pytest.raises(ScenarioError) as err:
        _with(extra)
    assert key in str(err.value) and "case.toml" in str(err.value)


@pytest.mark.parametrize("value, key", [
    ('{ steps = [["1 yr", "1 mg/L"]] }', "top.concentration"),
    ('{ table = [["2 yr", "1 mg/L"], ["1 yr", "2 mg/L"]] }', "top.concentration"),
    ('{ table = [["-1 yr", "1 mg/L"]] }', "top.concentration"),
    ('{ table = [["1 yr", "3 m"]] }', "top.concentration"),
    ('{ initial = "1 mg/L" }', "top.concentration"),
])
def test_bad_schedules_name_the_key(value, key):
    with pytest.raises(ScenarioError) as err:
        parse_scenario(BASE.replace('concentration = "120 mg/L"', f"concentration = {value}"),
                       path="case.toml")
    assert key in str(err.value)


DATA = tomllib.loads(BASE)
DATA["top"]["concentration"] = {"steps": [["0 yr", "120 mg/L"], ["3 yr", "0 mg/L"]]}
PATHS = list(_paths(DATA))
KEYS = ["at", "kind", "depth", "layer", "layers", "top", "darcy_flux", "steps", "table",
        "initial", "half_life", "rate", "start", "concentration", "half_lif"]


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(PATHS), st.sampled_from(KEYS + [None]), _values),
                min_size=1, max_size=3))
@example([(("title",), "layers", 0), (("layers", 0, "name"), "at", "")])
def test_fuzz_actions_and_schedules_raise_only_scenario_error(mutations):
    """Random values at random keys of a staged scenario with a schedule: parse_scenario
    either succeeds or raises ScenarioError (with a key path), never anything else."""
    parses_or_raises_scenario_error(mutate(DATA, mutations))
