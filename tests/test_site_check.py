"""`stratiflux check` on a site file, and the site CSVs' format problems in plain words.

What is checked (common practice for input validation: report every problem at once,
name the file, the line and the fix):

* ``check`` validates a site file (it was refused as a scenario: "crs: unknown key") and
  prints what a run would do; its counts equal those read independently from the CSVs
  with Python's csv module;
* problems in BOTH site CSVs come in one message naming both files;
* a semicolon- or tab-separated CSV and a Latin-1 (not UTF-8) CSV each get a message
  saying so, with the fix, and never a traceback.

The test site is invented (tests/test_site.py), not a check value.
"""
from __future__ import annotations

import csv

import pytest
from click.testing import CliRunner

from test_site import BORINGS, LOG, write_small_site
from transport.cli.main import main
from transport.scenario.reader import ScenarioError
from transport.site.config import load_site


def run_check(path):
    result = CliRunner().invoke(main, ["check", str(path)])
    assert "Traceback" not in result.output
    return result


def test_check_validates_a_site_file_and_counts_what_the_csvs_hold(tmp_path):
    site = write_small_site(tmp_path)
    result = run_check(site)
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(BORINGS.splitlines()))
    log = list(csv.DictReader(LOG.splitlines()))
    per = {r["id"]: sum(1 for x in log if x["id"] == r["id"]) for r in rows}
    deepest = max(float(x["bottom [m]"]) for x in log)
    assert f"Borings: {len(rows)}; {min(per.values())} to {max(per.values())} interval(s)" \
        in result.output
    assert f"to {deepest:g} m deep" in result.output
    assert "EPSG:32631" in result.output
    assert f"OK: {site} is valid ({len(rows)} boring(s)" in result.output


def test_problems_in_both_csvs_come_in_one_message(tmp_path):
    borings = BORINGS.replace("T-3,500061.0,", "T-3,abc,")
    log = LOG.replace("T-5,1.2,1.6,clay", "T-5,1.3,1.6,clay")  # a gap in T-5
    site = write_small_site(tmp_path, borings=borings, log=log)
    with pytest.raises(ScenarioError) as info:
        load_site(site)
    text = str(info.value)
    assert "problems in both CSV files" in text
    assert "borings.csv line 4" in text and "T-3" in text
    assert "log.csv lines" in text and "gap from 1.2 m to 1.3 m" in text
    assert "T-5" in info.value.borings
    result = run_check(site)
    assert result.exit_code == 2
    assert "borings.csv" in result.output and "log.csv" in result.output


@pytest.mark.parametrize("sep, word", [(";", "semicolons"), ("\t", "tabs")])
def test_a_csv_with_another_separator_says_so(tmp_path, sep, word):
    site = write_small_site(tmp_path, borings=BORINGS.replace(",", sep))
    result = run_check(site)
    assert result.exit_code == 2, result.output
    flat = " ".join(result.output.split())
    assert "borings.csv" in flat and f"separated by {word}" in flat
    assert "Fix:" in flat and "comma" in flat


def test_a_latin1_csv_says_which_byte_and_how_to_convert(tmp_path):
    site = write_small_site(tmp_path)
    (tmp_path / "log.csv").write_bytes(("# logs by the g\u00e9ologue\n" + LOG).encode("latin-1"))
    result = run_check(site)
    assert result.exit_code == 2, result.output
    flat = " ".join(result.output.split())
    assert "log.csv" in flat and "not UTF-8" in flat and "0xE9 on line 1" in flat
    assert "Latin-1" in flat and "save it as UTF-8" in flat


def test_a_latin1_scenario_file_gets_the_encoding_fix(tmp_path):
    path = tmp_path / "case.toml"
    path.write_bytes('title = "d\u00e9p\u00f4t"\n'.encode("latin-1"))
    result = run_check(path)
    assert result.exit_code == 2
    flat = " ".join(result.output.split())
    assert "not UTF-8" in flat and "save it as UTF-8" in flat
