"""Fuzzing scenario and site files: whatever the input, only ScenarioError escapes, its
message names a real key path, and each example finishes within seconds.

A few hundred examples per run in CI; several thousand with HYPOTHESIS_PROFILE=explore
(fresh random examples, see tests/conftest.py).  All inputs are invented test data.
"""
from __future__ import annotations

import json
import os
import re
import tempfile
import time
import tomllib
from pathlib import Path

from hypothesis import HealthCheck, event, given, settings, strategies as st

from test_scenario import _paths, _to_toml, _values, mutate
from test_site import BORINGS, LOG, SITE_TOML
from transport.scenario.schema import TOP_KEYS, ScenarioError, parse_scenario
from transport.site.config import SITE_KEYS, load_site

EXPLORE = os.environ.get("HYPOTHESIS_PROFILE") == "explore"
N_SCENARIO = 3000 if EXPLORE else 200
N_SITE = 1500 if EXPLORE else 100
SECONDS = 5.0
ROOT = Path(__file__).resolve().parent.parent
#: first parts a key path may start with (besides the file's own top-level keys)
SPECIAL = {"(file)", "(TOML syntax)", "header", "borings", "log", "initial"}

BASE = tomllib.loads((ROOT / "scenarios" / "alternatives" / "3-clay-cap.toml").read_text(
    encoding="utf-8"))
BASE["top"]["concentration"] = {"steps": [["0 yr", "120 mg/L"], ["3 yr", "0 mg/L"]]}
BASE["alternatives"] = [{"name": "A", "actions": []},
                        {"name": "B", "actions": [{"at": "2 yr", "kind": "remove-source"}]}]
BASE_PATHS = list(_paths(BASE))
KEYS = ["thickness", "porosity", "water_content", "half_life", "source_rate", "kind",
        "times", "depths", "receptor_depth", "samples", "samples_file", "table_file",
        "pore_diffusivity", "dispersivity", "darcy_flux", "concentration",
        "initial_concentration", "retardation_factor", "screening_level", "design_life",
        "layer", "layers", "actions", "alternatives", "at", "steps", "name", "nme"]

_hostile = st.sampled_from([
    "1e308 m^2/s", "1e-308 yr", "-1e308 m/yr", "1e300 mg/L", "1e-308 ug/L", "1e308 m",
    "-0.1 mg/L/d", "0 yr", "1e308", -1e308, 1e-308, "/dev/zero", ".", "", "\ufeff1 m",
    "inlet", "silt", "amend-layer", "set-flow", "x" * 300, "1 m" * 100,
    "5 yr", "0.3 m", "120 mg/L", "0.2 m/yr", "-0.2 m/yr", 0.5, 3])
_deep = st.integers(1, 40).map(lambda n: json.loads("[" * n + "]" * n))
_actions = st.lists(st.fixed_dictionaries({"at": _hostile, "kind": _hostile}), max_size=3)
# hostile values most often, deep nesting rarely (it is refused before anything else)
_anything = st.one_of(_hostile, _values, _hostile, _actions, _hostile, _values, _deep)


def _path_of_key(key: str) -> str:
    return re.split(r"[.\[( ]", str(key).lstrip("("), maxsplit=1)[0]


def assert_clean(fn, top_keys):
    """fn() succeeds or raises a ScenarioError whose key path starts at a real key, in
    at most SECONDS."""
    t0 = time.perf_counter()
    try:
        fn()
        event("accepted")
    except ScenarioError as exc:
        event(f"refused at {str(exc.key).split('.')[0].split('[')[0]}")
        msg = str(exc)
        assert exc.key and f": {exc.key}" in msg
        first = str(exc.key).split(".")[0].split("[")[0]
        known = exc.key in SPECIAL or first in top_keys or first in SPECIAL
        assert known or exc.problem == "unknown key", exc.key
        assert len(msg) < 20_000
    assert time.perf_counter() - t0 < SECONDS


def _scenario_text(data):
    try:
        return _to_toml(data)
    except TypeError:  # a value TOML cannot hold
        return None


@settings(max_examples=N_SCENARIO, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(st.lists(st.tuples(st.sampled_from(BASE_PATHS), st.sampled_from(KEYS + [None]),
                          _anything), min_size=1, max_size=4),
       st.booleans())
def test_fuzz_scenario_files(mutations, bom):
    """Random hostile values at random keys of a staged scenario with a schedule and
    alternatives (with or without a byte-order mark)."""
    text = _scenario_text(mutate(BASE, mutations))
    if text is None:
        return
    assert_clean(lambda: parse_scenario(("\ufeff" if bom else "") + text, "fuzz.toml"),
                 set(TOP_KEYS))


@settings(max_examples=N_SCENARIO // 2, deadline=None)
@given(st.text(alphabet=st.sampled_from(list('[]{}="\',.#\n -_0123456789eEkmsLgyrnt\ufeff')),
               max_size=400))
def test_fuzz_scenario_text(text):
    """Random TOML-ish text, brackets and all."""
    assert_clean(lambda: parse_scenario(text, "fuzz.toml"), set(TOP_KEYS))


SITE = tomllib.loads(SITE_TOML.replace("{extra}", ""))
SITE_PATHS = list(_paths(SITE))
SITE_KEY_NAMES = ["crs", "borings_file", "log_file", "initial_file", "porosity",
                  "source_rate", "half_life", "darcy_flux", "times", "screening_level",
                  "design_life", "receptor_depth", "depth_spacing", "kind", "materials"]
_cells = st.one_of(st.sampled_from(["", "nan", "inf", "-1", "1e308", "51230100.00", "3.1",
                                    "48.5", "T-1", "T-9", "sand", "granite", "0", "2.5",
                                    "x [m]", "id", "\ufeffid", "lon [deg]", "top [ft]"]),
                   st.text(max_size=8))


@st.composite
def _csv(draw, text):
    """``text`` with a few cells replaced, rows dropped or duplicated."""
    rows = [r.split(",") for r in text.strip().splitlines()]
    if draw(st.integers(0, 2)) == 0:  # a third of the files are left intact
        return text
    for _ in range(draw(st.integers(0, 3))):
        i = draw(st.integers(0, len(rows) - 1))
        j = draw(st.integers(0, len(rows[i]) - 1))
        rows[i][j] = draw(_cells).replace(",", ";").replace("\n", " ")
    if draw(st.integers(0, 3)) == 0:
        k = draw(st.integers(1, len(rows) - 1))
        rows.insert(k, list(rows[k]) if draw(st.booleans()) else [])
    return "\n".join(",".join(r) for r in rows) + "\n"


@settings(max_examples=N_SITE, deadline=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(st.lists(st.tuples(st.sampled_from(SITE_PATHS), st.sampled_from(SITE_KEY_NAMES + [None]),
                          _anything), max_size=2),
       _csv(BORINGS), _csv(LOG), st.booleans())
def test_fuzz_site_files(mutations, borings, log, bom):
    """Random values in the site file and random damage to its borings and log CSVs."""
    text = _scenario_text(mutate(SITE, mutations))
    if text is None:
        return
    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        (folder / "borings.csv").write_text(borings, encoding="utf-8")
        (folder / "log.csv").write_text(log, encoding="utf-8")
        path = folder / "site.toml"
        path.write_text(("\ufeff" if bom else "") + text, encoding="utf-8")
        assert_clean(lambda: load_site(path), set(SITE_KEYS))
