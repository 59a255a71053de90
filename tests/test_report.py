"""The HTML report (``stratiflux report``): one self-contained file a reviewer can open.

External references used here:

* the Python standard library's HTML parser (:mod:`html.parser`, following the HTML
  Living Standard's tokenizer) reads the file back;
* FIPS 180-4 SHA-256 through :mod:`hashlib` for the input hash;
* RFC 2397 (``data:`` URLs) and RFC 4648 (base64) for the embedded figures, and the PNG
  signature of the PNG specification (W3C 2003, sec. 5.2);
* the receptor metrics shown are those of
  :func:`transport.analysis.metrics.receptor_metrics` on the same run (the library's
  own reading, computed here independently of the report code).

The scenario is the invented spill demo (``scenarios/spill-layered-column.toml``).
"""
from __future__ import annotations

import base64
import hashlib
import os
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from transport.analysis.metrics import receptor_metrics
from transport.analysis.report import build_report, write_report_html
from transport.analysis.summary import format_concentration, format_time, run_horizon
from transport.api import solve_scenario
from transport.caution import CAUTION
from transport.cli.main import main
from transport.scenario.schema import load_scenario
from transport.verify.report import case_names

SCENARIO = Path(__file__).resolve().parents[1] / "scenarios" / "spill-layered-column.toml"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


class Page(HTMLParser):
    """Tags, attributes, text and table cells of an HTML document."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags, self.text, self.stack = [], [], []
        self.tables, self._row, self._cell, self._table = [], None, None, None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.append((tag, attrs))
        if tag not in ("meta", "img", "br", "link", "input"):
            self.stack.append(tag)
        if tag == "table":
            self._table = {"class": attrs.get("class"), "rows": []}
            self.tables.append(self._table)
        elif tag == "tr" and self._table is not None:
            self._row = []
            self._table["rows"].append(self._row)
        elif tag in ("td", "th") and self._row is not None:
            self._cell = {"text": "", "si": attrs.get("data-si")}
            self._row.append(self._cell)

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"unbalanced </{tag}>"
        self.stack.pop()
        if tag in ("td", "th"):
            self._cell = None
        elif tag == "table":
            self._table = None

    def handle_data(self, data):
        self.text.append(data)
        if self._cell is not None:
            self._cell["text"] += data


def parse(text: str) -> Page:
    page = Page()
    page.feed(text)
    page.close()
    assert page.stack == [], f"unclosed tags {page.stack}"
    return page


@pytest.fixture(scope="module")
def cli_report(tmp_path_factory):
    """``stratiflux report`` on the demo, quick verification suite included."""
    folder = tmp_path_factory.mktemp("report")
    out = folder / "report.html"
    result = CliRunner().invoke(main, ["report", str(SCENARIO), "-o", str(out)])
    assert result.exit_code == 0, result.output
    return folder, out, result.output


@pytest.fixture(scope="module")
def run():
    """The same scenario solved here, and the report built from this very run."""
    sc = load_scenario(SCENARIO)
    solution, caught = solve_scenario(sc)
    return sc, solution, build_report(sc, solution, warnings=caught, figures=False)


def test_report_is_one_self_contained_html_file(cli_report):
    """html.parser reads it with balanced tags; no script, no link, no remote src/href
    (only in-page anchors), no url() or @import in the style; every image is a PNG
    data URI (RFC 2397, base64 per RFC 4648, PNG signature); no temporary file is left
    beside it (written through transport.io.atomic)."""
    folder, out, _ = cli_report
    text = out.read_text(encoding="utf-8")
    page = parse(text)
    names = [t for t, _ in page.tags]
    assert names[0] == "html" and "head" in names and "body" in names
    assert "script" not in names and "link" not in names and "iframe" not in names
    images = [a for t, a in page.tags if t == "img"]
    assert len(images) == 2  # profiles and breakthrough curve
    for attrs in images:
        src = attrs["src"]
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1], validate=True)[:8] == PNG_SIGNATURE
        assert attrs.get("alt")
    for tag, attrs in page.tags:
        for key in ("src", "href", "srcset", "action", "poster", "data"):
            value = attrs.get(key)
            if value is None:
                continue
            assert not value.lower().startswith(("http:", "https:", "//", "ftp:", "file:")), \
                (tag, key, value)
            if key == "href":
                assert value.startswith("#"), value
    style = text.split("<style>", 1)[1].split("</style>", 1)[0]
    assert "url(" not in style and "@import" not in style
    assert sorted(os.listdir(folder)) == ["report.html"]


def test_report_carries_the_caution_head_and_foot(cli_report):
    """The caution (transport.caution.CAUTION) in the document head, at the top of the
    page and in its footer, deferring to the regulator and licensed professionals."""
    page = parse(cli_report[1].read_text(encoding="utf-8"))
    meta = [a for t, a in page.tags if t == "meta" and a.get("name") == "description"]
    assert meta and meta[0]["content"] == CAUTION
    ids = {a.get("id") for t, a in page.tags}
    assert {"caution-head", "caution-foot"} <= ids
    text = "".join(page.text)
    assert text.count(CAUTION) >= 3  # top of the page, assumptions, footer


def test_input_hash_is_sha256_of_the_scenario(cli_report):
    """The SHA-256 shown equals hashlib.sha256 of the scenario file (FIPS 180-4)."""
    text = cli_report[1].read_text(encoding="utf-8")
    want = hashlib.sha256(SCENARIO.read_bytes()).hexdigest()
    page = parse(text)
    codes = [c["text"] for table in page.tables for row in table["rows"] for c in row]
    assert want in codes
    assert SCENARIO.read_text(encoding="utf-8") in "".join(page.text)  # as typed


def test_verification_status_per_case(cli_report):
    """Every case of the quick suite is listed with pass/FAIL and its source, and the
    suite's wall time is stated."""
    page = parse(cli_report[1].read_text(encoding="utf-8"))
    table = next(t for t in page.tables
                 if [c["text"] for c in t["rows"][0]][:2] == ["case", "result"])
    rows = {r[0]["text"]: r for r in table["rows"][1:]}
    assert sorted(rows) == sorted(case_names(quick=True))
    assert all(r[1]["text"] in ("pass", "FAIL") and r[5]["text"] for r in rows.values())
    text = "".join(page.text)
    assert "run on this installation in " in text and " s: " in text
    assert "Verification:" in cli_report[2]


def _metrics_table(report_html):
    page = parse(report_html)
    table = next(t for t in page.tables if t["class"] == "metrics")
    head = [c["text"] for c in table["rows"][0]]
    rows = {r[0]["text"]: r[1:] for r in table["rows"][1:]}
    return head, rows


def test_metrics_shown_equal_receptor_metrics_of_the_run(run, tmp_path):
    """Design-life and whole-run columns hold receptor_metrics(solution, z, level,
    horizon) of the same run, the horizons being the design life and the run's end
    (last output time or design life if later); the shown text is the value
    formatted by format_time / format_concentration."""
    sc, solution, report = run
    out = write_report_html(report, tmp_path / "r.html")
    head, rows = _metrics_table(Path(out).read_text(encoding="utf-8"))
    z, level, life = (sc.output.receptor_depth, sc.output.screening_level,
                      sc.output.design_life)
    horizons = [life, run_horizon(solution.times, life)]
    assert life < horizons[1]  # the demo runs beyond its design life: two views
    assert len(head) == 3 and "design life" in head[1] and "whole run" in head[2]
    fields = {"first reaches the screening level": ("first_exceedance", format_time),
              "time above the screening level": ("time_above_level", format_time),
              "highest concentration": ("peak_concentration", format_concentration),
              "time of the highest concentration": ("peak_time", format_time),
              "steady concentration (long-term limit)": ("steady_concentration",
                                                         format_concentration),
              "time to 95 % of the steady value": ("time_to_95_percent_steady",
                                                   format_time)}
    for k, horizon in enumerate(horizons):
        want = receptor_metrics(solution, z, level, horizon)
        for label, (name, fmt) in fields.items():
            cell = rows[label][k]
            value = getattr(want, name)
            assert value is not None, name
            np.testing.assert_allclose(float(cell["si"]), value, rtol=1e-12, err_msg=label)
            assert cell["text"] == fmt(value), label
        np.testing.assert_allclose(float(rows["mass passed the receptor (mg/m²)"][k]["si"]),
                                   want.cumulative_mass, rtol=1e-12)
    # the design-life window ends below the later values: the peak lies beyond it
    design = receptor_metrics(solution, z, level, life)
    assert rows["peak after the end of the window?"][0]["text"].startswith(
        "yes (still rising")
    assert design.peak_time == pytest.approx(life, rel=1e-9)


def test_derived_table_and_sources(run, tmp_path):
    """One row per layer with the derived values of Scenario.derived_table() (SI in
    data-si) and every source text listed."""
    sc, _, report = run
    text = Path(write_report_html(report, tmp_path / "r.html")).read_text(encoding="utf-8")
    page = parse(text)
    table = next(t for t in page.tables if t["rows"][0][0]["text"] == "layer")
    derived = sc.derived_table()
    assert [r[0]["text"] for r in table["rows"][1:]] == [d["name"] for d in derived]
    head = [c["text"] for c in table["rows"][0]]
    col = head.index("R")
    np.testing.assert_allclose([float(r[col]["si"]) for r in table["rows"][1:]],
                               [d["retardation_factor"] for d in derived], rtol=1e-15)
    body = "".join(page.text)
    for d in derived:
        assert d["sorption_source"] in body and d["diffusion_source"] in body


def test_report_without_verification_says_so(run, tmp_path):
    """A report built without the suite says that it was not run and how to run it
    (no pass/fail table that could be mistaken for a check of this installation)."""
    _, _, report = run
    assert report.verification is None
    text = Path(write_report_html(report, tmp_path / "r.html")).read_text(encoding="utf-8")
    body = "".join(parse(text).text)
    assert "verification suite was not run" in body and "stratiflux verify" in body
