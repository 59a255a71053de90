"""Fault injection: a failed run leaves the previous outputs byte-identical.

For ``run``, ``compare`` and ``site`` a failure is injected at each step that produces
an output (solve, summary, each writer, each figure, the final renames, SIGTERM) and
the output folders written by an earlier successful run are hashed before and after:
nothing may change and no temporary file may remain. Resumable site runs: damaged
chunks (truncated, empty, altered, missing) are computed again, and a ``site`` run
killed with SIGKILL at a few random points, then started again, gives the same file as
an uninterrupted run, with no orphan worker process and no stale temporary file.

All scenario and site data here are invented test inputs.
"""
from __future__ import annotations

import hashlib
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path

import netCDF4
import numpy as np
import pytest
import xarray as xr
from click.testing import CliRunner
from matplotlib.figure import Figure

from test_site import BORINGS, SITE_TOML, write_small_site
from test_site_outputs import MC
from transport.cli.main import main
from transport.io import netcdf_file
from transport.io.atomic import TEMP_PATTERN, OutputSet, clean_stale
from transport.site.config import load_site
from transport.site.run import run_site

SLAB = """\
title = "{title}"

[[layers]]
name = "silt"
thickness = "1 m"
porosity = 0.4
retardation_factor = 1.5
pore_diffusivity = "1e-9 m^2/s"

[[layers]]
name = "clay"
thickness = "2 m"
porosity = 0.45
retardation_factor = 3.0
pore_diffusivity = "4e-10 m^2/s"

[top]
kind = "concentration"
concentration = "{conc} mg/L"

[bottom]
kind = "concentration"
concentration = "0 mg/L"

[output]
times = {times}
depth_spacing = "10 cm"
receptor_depth = "1.5 m"
screening_level = "5 mg/L"
"""
TIMES = '{ start = "0.2 yr", stop = "5 yr", count = 5 }'


class Injected(Exception):
    """The fault injected by a test."""


def raiser(*args, **kwargs):
    raise Injected("injected fault")


def slab(folder: Path, name="slab.toml", title="Invented two-layer slab", conc=100,
         times=TIMES) -> Path:
    path = folder / name
    path.write_text(SLAB.format(title=title, conc=conc, times=times), encoding="utf-8")
    return path


def snapshot(*folders) -> dict:
    """{path: sha256} of every file under ``folders`` (hidden ones included)."""
    out = {}
    for folder in folders:
        for path in sorted(Path(folder).rglob("*")):
            if path.is_file():
                out[str(path)] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


def temporaries(*folders) -> list:
    """Files under ``folders`` named like a temporary of the tool (or any '.part')."""
    return sorted(str(p) for folder in folders for p in Path(folder).rglob("*")
                  if TEMP_PATTERN.match(p.name) or ".part" in p.name)


def fail_on_call(original, n):
    """A wrapper of ``original`` that raises on its n-th call (1-based)."""
    calls = {"n": 0}

    def wrapper(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == n:
            raise Injected(f"injected fault at call {n}")
        return original(*args, **kwargs)
    wrapper.calls = calls
    return wrapper


def replace_failing_for(suffix):
    """os.replace that fails when renaming onto a path ending with ``suffix``."""
    real = os.replace

    def replace(src, dst, *args, **kwargs):
        if os.fspath(dst).endswith(suffix):
            raise PermissionError(13, "Permission denied (injected)", os.fspath(dst))
        return real(src, dst, *args, **kwargs)
    return replace


def partial_write_layout():
    """The single run's NetCDF writer (netCDF4-python) writing part of the file, then
    reporting a full disk."""
    real = netcdf_file.write_layout

    def write_layout(layout, target):
        real(replace(layout, metrics={}), target)
        raise OSError(28, "No space left on device (injected)", os.fspath(target))
    return write_layout


def partial_to_netcdf():
    """Dataset.to_netcdf that writes part of the file, then reports a full disk."""
    real = xr.Dataset.to_netcdf

    def to_netcdf(self, target, *args, **kwargs):
        real(self.isel(time=slice(0, 1)), target, *args, **kwargs)
        raise OSError(28, "No space left on device (injected)", os.fspath(target))
    return to_netcdf


def partial_savefig(n):
    """Figure.savefig that writes a few bytes on its n-th call and then fails."""
    real = Figure.savefig
    calls = {"n": 0}

    def savefig(self, fname, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] == n:
            with open(fname, "wb") as fh:
                fh.write(b"\x89PNG\r\n")
            raise Injected("injected fault in savefig")
        return real(self, fname, *args, **kwargs)
    return savefig


# ==================================================================================== run
@pytest.fixture(scope="module")
def run_baseline(tmp_path_factory):
    """A successful ``run`` with figures: the folders that a failed run must not touch."""
    base = tmp_path_factory.mktemp("run-base")
    (base / "out").mkdir()
    scenario = slab(base)
    result = CliRunner().invoke(main, ["run", str(scenario), "-o", str(base / "out/keep.nc"),
                                       "--plots", str(base / "figs")])
    assert result.exit_code == 0, result.output
    assert sorted(p.name for p in (base / "figs").iterdir()) == [
        "keep_breakthrough.png", "keep_profiles.png"]
    return base


@pytest.fixture
def run_folders(run_baseline, tmp_path):
    shutil.copytree(run_baseline / "out", tmp_path / "out")
    shutil.copytree(run_baseline / "figs", tmp_path / "figs")
    # a changed scenario: had any of its files reached the folders, hashes would differ
    return tmp_path, slab(tmp_path, title="Invented two-layer slab, second run", conc=250)


RUN_FAULTS = {
    "solve": ("transport.cli.common.solve_scenario", raiser),
    "summary": ("transport.cli.common.summary_lines", raiser),
    "netcdf writer": ("transport.cli.run.write_column_netcdf", raiser),
    "netcdf disk full": (netcdf_file, "write_layout", partial_write_layout),
    "profiles figure": ("transport.plot.column.plot_profiles", raiser),
    "breakthrough figure": ("transport.plot.column.plot_breakthrough", raiser),
    "second savefig": (Figure, "savefig", lambda: partial_savefig(2)),
    "last rename": (os, "replace", lambda: replace_failing_for("keep_breakthrough.png")),
}


def _inject(monkeypatch, spec):
    if isinstance(spec[0], str):
        monkeypatch.setattr(spec[0], spec[1])
    else:
        monkeypatch.setattr(spec[0], spec[1], spec[2]())


@pytest.mark.parametrize("step", list(RUN_FAULTS))
def test_run_failure_at_each_step_keeps_previous_files(run_folders, monkeypatch, step):
    folder, scenario = run_folders
    before = snapshot(folder / "out", folder / "figs")
    _inject(monkeypatch, RUN_FAULTS[step])
    result = CliRunner().invoke(main, ["run", str(scenario), "-o", str(folder / "out/keep.nc"),
                                       "--plots", str(folder / "figs")])
    assert result.exit_code != 0, result.output
    assert snapshot(folder / "out", folder / "figs") == before
    assert temporaries(folder) == []


def test_run_failing_in_the_summary_keeps_the_file(run_folders):
    """The case of the issue: ``times = ["0 yr"]`` fails after solving (no positive
    output time): exit 2 and the old file unchanged."""
    folder, _ = run_folders
    before = snapshot(folder / "out", folder / "figs")
    bad = slab(folder, name="zero.toml", times='["0 yr"]')
    result = CliRunner().invoke(main, ["run", str(bad), "-o", str(folder / "out/keep.nc"),
                                       "--plots", str(folder / "figs")])
    assert result.exit_code == 2, result.output
    assert snapshot(folder / "out", folder / "figs") == before
    assert temporaries(folder) == []


class Escaped(Exception):
    """SIGTERM reached the test's own handler: the command installed none."""


def invoke_with_sigterm(monkeypatch, module, name, args):
    """Invoke the CLI with SIGTERM sent from inside ``module.name`` (after the first
    outputs are staged). A fallback handler turns a missing handler in the command
    into a test failure instead of the end of the test process."""
    real = getattr(module, name)

    def terminated(*a, **kw):
        os.kill(os.getpid(), signal.SIGTERM)
        return real(*a, **kw)

    def fallback(signum, frame):
        raise Escaped

    monkeypatch.setattr(module, name, terminated)
    previous = signal.signal(signal.SIGTERM, fallback)
    try:
        return CliRunner().invoke(main, [str(a) for a in args])
    finally:
        signal.signal(signal.SIGTERM, previous)


def test_run_sigterm_while_writing_removes_temporaries(run_folders, monkeypatch):
    """SIGTERM during the figures ends the run like Ctrl-C: old files kept, no debris."""
    import transport.plot.column as plots

    folder, scenario = run_folders
    before = snapshot(folder / "out", folder / "figs")
    result = invoke_with_sigterm(monkeypatch, plots, "plot_breakthrough", [
        "run", scenario, "-o", folder / "out/keep.nc", "--plots", folder / "figs"])
    assert not isinstance(result.exception, Escaped)
    assert result.exit_code == 128 + signal.SIGTERM
    assert snapshot(folder / "out", folder / "figs") == before
    assert temporaries(folder) == []


def test_run_success_replaces_all_and_cleans_stale_temporaries(run_folders):
    """A later successful run removes the debris of a killed run of the same outputs
    (and only that), and replaces the netCDF file and both figures."""
    folder, scenario = run_folders
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    stale = [folder / "out" / f".keep.nc.{dead.pid}-abc123.part.nc",
             folder / "figs" / f".keep_profiles.png.{dead.pid}-zz9zz9.part.png",
             folder / "out" / ".keep.nc.x8y_7abc.part"]  # the name an earlier version used
    alive = folder / "out" / f".keep.nc.{os.getppid()}-live00.part.nc"  # a run going on
    mine = [folder / "out" / "keep.nc.part", folder / "out" / ".keep.nc.mine.part",
            folder / "figs" / ".other.png.123-abc123.part.png"]
    for path in stale + [alive] + mine:
        path.write_bytes(b"")
        os.utime(path, (time.time() - 3600, time.time() - 3600))
    before = snapshot(folder / "out", folder / "figs")
    result = CliRunner().invoke(main, ["run", str(scenario), "-o", str(folder / "out/keep.nc"),
                                       "--plots", str(folder / "figs")])
    assert result.exit_code == 0, result.output
    after = snapshot(folder / "out", folder / "figs")
    for name in ("out/keep.nc", "figs/keep_profiles.png", "figs/keep_breakthrough.png"):
        assert after[str(folder / name)] != before[str(folder / name)]
    assert not any(p.exists() for p in stale)
    assert alive.exists() and all(p.exists() for p in mine)
    with netCDF4.Dataset(folder / "out/keep.nc") as nc:
        assert nc.title == "Invented two-layer slab, second run"


# ================================================================================ compare
@pytest.fixture(scope="module")
def compare_baseline(tmp_path_factory):
    base = tmp_path_factory.mktemp("cmp-base")
    a = slab(base, "a.toml", title="Alternative A (invented)", conc=100)
    b = slab(base, "b.toml", title="Alternative B (invented)", conc=40)
    result = CliRunner().invoke(main, ["compare", str(a), str(b), "-o", str(base / "out")])
    assert result.exit_code == 0, result.output
    assert len(list((base / "out").iterdir())) == 6  # csv, md, nc, three figures
    return base


COMPARE_FAULTS = {
    "solve": ("transport.cli.compare.compare_alternatives", raiser),
    "table": ("transport.analysis.compare.table_csv", raiser),
    "verdicts": ("transport.analysis.compare.verdict_lines", raiser),
    "netcdf dataset": ("transport.analysis.compare.comparison_dataset", raiser),
    "netcdf writer": ("transport.analysis.compare.write_dataset_atomic", raiser),
    "netcdf disk full": (xr.Dataset, "to_netcdf", partial_to_netcdf),
    "figures": ("transport.plot.compare.plot_comparison", raiser),
    "third savefig": (Figure, "savefig", lambda: partial_savefig(3)),
    "last rename": (os, "replace", lambda: replace_failing_for("comparison_profiles.png")),
}


@pytest.mark.parametrize("step", list(COMPARE_FAULTS))
def test_compare_failure_at_each_step_keeps_previous_files(compare_baseline, tmp_path,
                                                           monkeypatch, step):
    shutil.copytree(compare_baseline / "out", tmp_path / "out")
    a = slab(tmp_path, "a.toml", title="Alternative A, again (invented)", conc=120)
    b = slab(tmp_path, "b.toml", title="Alternative B, again (invented)", conc=30)
    before = snapshot(tmp_path / "out")
    _inject(monkeypatch, COMPARE_FAULTS[step])
    result = CliRunner().invoke(main, ["compare", str(a), str(b), "-o", str(tmp_path / "out")])
    assert result.exit_code != 0, result.output
    assert snapshot(tmp_path / "out") == before
    assert temporaries(tmp_path) == []


def test_compare_sigterm_while_writing_removes_temporaries(compare_baseline, tmp_path,
                                                           monkeypatch):
    import transport.plot.compare as plots_compare

    shutil.copytree(compare_baseline / "out", tmp_path / "out")
    a = slab(tmp_path, "a.toml", title="Alternative A, again (invented)", conc=120)
    b = slab(tmp_path, "b.toml", title="Alternative B, again (invented)", conc=30)
    before = snapshot(tmp_path / "out")
    result = invoke_with_sigterm(monkeypatch, plots_compare, "plot_comparison", [
        "compare", a, b, "-o", tmp_path / "out"])
    assert not isinstance(result.exception, Escaped)
    assert result.exit_code == 128 + signal.SIGTERM
    assert snapshot(tmp_path / "out") == before
    assert temporaries(tmp_path) == []


# =================================================================================== site
def resume_state(out: Path, stem="site"):
    return {out / f"{stem}.nc.progress.json", out / f".{stem}.chunks"}


def assert_unchanged(out: Path, before: dict):
    """Every earlier file byte-identical; new entries only the resume state."""
    after = snapshot(out)
    state = resume_state(out)
    kept = {k: v for k, v in after.items()
            if not any(Path(k) == s or s in Path(k).parents for s in state)}
    assert kept == before
    assert temporaries(out) == []


@pytest.fixture(scope="module")
def site_baseline(tmp_path_factory):
    base = tmp_path_factory.mktemp("site-base")
    site = load_site(write_small_site(base))
    run_site(site, base / "out", realizations=0, workers=1, chunk_size=2)
    assert sorted(p.name for p in (base / "out").iterdir()) == [
        "site.geojson", "site.gpkg", "site.nc", "site_borings.csv", "site_map.png"]
    return base


def second_site(folder: Path, borings=BORINGS):
    """The test yard with a stronger source: different results in every file."""
    return load_site(write_small_site(folder, borings=borings,
                                      toml=SITE_TOML.replace('"10 mg/L"', '"14 mg/L"')))


SITE_FAULTS = {
    # the workers' solve (packed chunks) fails at the second chunk
    "solve": ("transport.site.batch.solve_packed", None, 2),
    # the NetCDF writer takes blocks of chunks: this small site is one block, so the
    # first write fails
    "netcdf chunk": ("transport.io.site_netcdf.SiteNetCDFWriter.write_chunk", None, 1),
    "station table": ("transport.site.run.station_table", raiser),
    "geopackage": ("transport.site.run.write_geopackage", raiser),
    "geojson": ("transport.site.run.write_geojson", raiser),
    "csv": ("transport.site.run.write_metrics_csv", raiser),
    "map": ("transport.plot.site_map.plot_site_map", raiser),
    "savefig": (Figure, "savefig", lambda: partial_savefig(1)),
    "last rename": (os, "replace", lambda: replace_failing_for("site_map.png")),
}


@pytest.mark.parametrize("step", list(SITE_FAULTS))
def test_site_failure_at_each_step_keeps_previous_files(site_baseline, tmp_path,
                                                        monkeypatch, step):
    out = tmp_path / "out"
    shutil.copytree(site_baseline / "out", out)
    before = snapshot(out)
    site = second_site(tmp_path)
    spec = SITE_FAULTS[step]
    if spec[1] is None:  # a method or function failing on its n-th call (spec[2])
        module_path, name = spec[0].rsplit(".", 1)
        import importlib

        try:
            owner = importlib.import_module(module_path)
        except ImportError:
            mod, cls = module_path.rsplit(".", 1)
            owner = getattr(importlib.import_module(mod), cls)
        monkeypatch.setattr(owner, name, fail_on_call(getattr(owner, name), spec[2]))
    else:
        _inject(monkeypatch, spec)
    with pytest.raises((Injected, PermissionError)):
        run_site(site, out, realizations=0, workers=1, chunk_size=2)
    assert_unchanged(out, before)


def test_site_mistyped_easting_keeps_previous_files(site_baseline, tmp_path):
    """The case of the issue: an easting typed with two extra digits ends in one input
    error (no traceback) and nothing is replaced."""
    out = tmp_path / "out"
    shutil.copytree(site_baseline / "out", out)
    before = snapshot(out)
    borings = BORINGS.replace("T-3,500061.0,", "T-3,50006100.0,")
    site_file = write_small_site(tmp_path, borings=borings)
    result = CliRunner().invoke(main, ["site", str(site_file), "-o", str(out), "--workers",
                                       "1", "--chunk-size", "2"])
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    assert_unchanged(out, before)


def test_gis_writer_refusal_is_an_input_error(site_baseline, tmp_path):
    """Should coordinates that GDAL refuses reach the GIS writers, the refusal names the
    file and the cause, and leaves no file behind."""
    from transport.io.gis import station_table, write_geojson

    table = station_table(site_baseline / "out" / "site.nc")
    table.loc[2, "x_m"] = 50006100.0
    target = tmp_path / "site.geojson"
    with pytest.raises(ValueError, match="site.geojson.*no output file was changed"):
        write_geojson(table, target)
    assert list(tmp_path.iterdir()) == []


# ------------------------------------------------------------------------ damaged chunks
def same_site_file(a, b):
    """The two site files hold the same data (times of writing and history aside)."""
    with netCDF4.Dataset(a) as x, netCDF4.Dataset(b) as y:
        skip = {"history", "date_created"}
        assert {k: x.getncattr(k) for k in x.ncattrs() if k not in skip} == \
            {k: y.getncattr(k) for k in y.ncattrs() if k not in skip}
        assert set(x.variables) == set(y.variables)
        for name in x.variables:
            u, v = x[name], y[name]
            assert u.ncattrs() == v.ncattrs(), name
            assert {k: str(u.getncattr(k)) for k in u.ncattrs()} == \
                {k: str(v.getncattr(k)) for k in v.ncattrs()}, name
            if u.dtype == str or u.dtype == object:
                assert list(u[:]) == list(v[:]), name
            else:
                np.testing.assert_array_equal(np.ma.filled(u[...], np.nan),
                                              np.ma.filled(v[...], np.nan), err_msg=name)


@pytest.fixture(scope="module")
def site_reference(tmp_path_factory):
    """An uninterrupted run of the test yard, and the chunk files of an interrupted one."""
    base = tmp_path_factory.mktemp("site-ref")
    site = load_site(write_small_site(base))
    files = run_site(site, base / "ref", realizations=0, workers=1, chunk_size=2)
    interrupted = base / "interrupted"
    import transport.plot.site_map as site_map

    real = site_map.plot_site_map
    site_map.plot_site_map = raiser
    try:
        with pytest.raises(Injected):
            run_site(site, interrupted, realizations=0, workers=1, chunk_size=2)
    finally:
        site_map.plot_site_map = real
    state = json.loads((interrupted / "site.nc.progress.json").read_text())
    assert state["done"] == [0, 1, 2] and len(state["sha256"]) == 3
    return site, files, interrupted


def _truncate(path):
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def _empty(path):
    path.write_bytes(b"")


def _alter(path):  # same size, one byte changed: only a checksum sees it
    data = bytearray(path.read_bytes())
    data[len(data) // 2] ^= 0xFF
    path.write_bytes(bytes(data))


def _remove(path):
    path.unlink()


@pytest.mark.parametrize("damage", [_truncate, _empty, _alter, _remove],
                         ids=["truncated", "empty", "altered", "missing"])
def test_damaged_chunk_is_recomputed_on_resume(site_reference, tmp_path, damage):
    site, reference, interrupted = site_reference
    out = tmp_path / "out"
    shutil.copytree(interrupted, out)
    damage(out / ".site.chunks" / "chunk-000001.npz")
    files = run_site(site, out, realizations=0, workers=1, chunk_size=2)
    assert (files.chunks_reused, files.chunks_computed) == (2, 1)
    assert files.chunks_damaged == (0 if damage is _remove else 1)
    same_site_file(files.netcdf, reference.netcdf)
    assert Path(files.csv).read_bytes() == Path(reference.csv).read_bytes()
    assert not resume_state(out) & set(out.iterdir())
    assert temporaries(out) == []


def test_chunks_without_checksums_are_read_back_and_bad_ones_recomputed(site_reference,
                                                                        tmp_path):
    """A sidecar of an earlier version (no checksums): chunks that cannot be read back
    are computed again instead of ending the run with a BadZipFile traceback."""
    site, reference, interrupted = site_reference
    out = tmp_path / "out"
    shutil.copytree(interrupted, out)
    sidecar = out / "site.nc.progress.json"
    state = json.loads(sidecar.read_text())
    del state["sha256"]
    sidecar.write_text(json.dumps(state))
    _truncate(out / ".site.chunks" / "chunk-000000.npz")
    _empty(out / ".site.chunks" / "chunk-000002.npz")
    files = run_site(site, out, realizations=0, workers=1, chunk_size=2)
    assert (files.chunks_reused, files.chunks_computed, files.chunks_damaged) == (1, 2, 2)
    same_site_file(files.netcdf, reference.netcdf)


def test_damaged_chunk_through_the_command_line(site_reference, tmp_path):
    """The command says what it recomputed and ends normally (no 'Aborted!')."""
    site, reference, interrupted = site_reference
    out = tmp_path / "out"
    shutil.copytree(interrupted, out)
    _empty(out / ".site.chunks" / "chunk-000000.npz")
    result = CliRunner().invoke(main, ["site", str(site.path), "-o", str(out), "--workers",
                                       "1", "--chunk-size", "2", "--realizations", "0"])
    assert result.exit_code == 0, result.output
    assert "Aborted" not in result.output
    assert "1 saved chunk(s)" in " ".join(result.output.split())
    same_site_file(out / "site.nc", reference.netcdf)


def test_damaged_sidecar_starts_afresh(site_reference, tmp_path):
    site, reference, interrupted = site_reference
    out = tmp_path / "out"
    shutil.copytree(interrupted, out)
    (out / "site.nc.progress.json").write_bytes(b"")
    files = run_site(site, out, realizations=0, workers=1, chunk_size=2)
    assert (files.chunks_reused, files.chunks_computed) == (0, 3)
    same_site_file(files.netcdf, reference.netcdf)


# --------------------------------------------------------------------- SIGKILL and resume
N_KILL_BORINGS = 24
KILL_MC = dict(realizations=480, seed=3)  # a run of several block flushes (BLOCK_SECONDS)


def kill_site(folder: Path) -> Path:
    """An invented yard of 24 borings, a clay lens under every third one, uncertain
    clay Kd and half-life."""
    borings = ["id,x [m],y [m],ground_elevation [m]"]
    log = ["id,top [m],bottom [m],material"]
    for i in range(N_KILL_BORINGS):
        bid = f"K-{i + 1:02d}"
        borings.append(f"{bid},{500000 + 25.5 * i:.2f},{5600000 + 11.25 * i:.2f},"
                       f"{20 + 0.1 * i:.2f}")
        bottom = 2.4 + 0.05 * (i % 5)
        if i % 3 == 0:
            log += [f"{bid},0,0.9,sand", f"{bid},0.9,1.4,clay", f"{bid},1.4,{bottom:.2f},sand"]
        else:
            log.append(f"{bid},0,{bottom:.2f},sand")
    return write_small_site(folder, extra=MC, borings="\n".join(borings) + "\n",
                            log="\n".join(log) + "\n")


def _descendants(pid):
    try:
        import psutil
    except ImportError:  # /proc: every process whose parent chain leads to pid
        parents = {}
        for entry in os.listdir("/proc"):
            if entry.isdigit():
                try:
                    with open(f"/proc/{entry}/stat") as fh:
                        stat = fh.read()
                    parents[int(entry)] = int(stat.rsplit(")", 1)[1].split()[1])
                except (OSError, ValueError, IndexError):
                    continue
        found, frontier = [], [pid]
        while frontier:
            p = frontier.pop()
            kids = [c for c, pp in parents.items() if pp == p]
            found += kids
            frontier += kids
        return found
    try:
        return [c.pid for c in psutil.Process(pid).children(recursive=True)]
    except psutil.NoSuchProcess:
        return []


def _running(pid) -> bool:
    """Alive and not a zombie (a dead child not yet reaped by init)."""
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] not in ("Z", "X")
    except OSError:
        return False


def _site_command(site_file, out):
    return [sys.executable, "-c", "import sys; sys.argv[0] = 'stratiflux'; "
            "from transport.cli.main import main; main()", "site", str(site_file), "-o", str(out),
            "--workers", "2", "--chunk-size", "1", "--realizations",
            str(KILL_MC["realizations"]), "--seed", str(KILL_MC["seed"])]


@pytest.fixture(scope="module")
def kill_reference(tmp_path_factory):
    base = tmp_path_factory.mktemp("kill-ref")
    site_file = kill_site(base)
    files = run_site(load_site(site_file), base / "ref", workers=1, chunk_size=1, **KILL_MC)
    return site_file, files


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="uses /proc and SIGKILL")
@pytest.mark.parametrize("seed", [3, 11])
def test_sigkill_then_resume_gives_the_same_file(kill_reference, tmp_path, seed):
    site_file, reference = kill_reference
    rng = random.Random(seed)
    wait_chunks, extra = rng.randint(1, 6), rng.uniform(0.0, 0.3)
    out = tmp_path / "out"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(Path(__file__).resolve().parent.parent)] + sys.path))
    log = tmp_path / "killed.log"  # a file, not a pipe: a full pipe would stall the run
    with open(log, "wb") as fh:
        proc = subprocess.Popen(_site_command(site_file, out), env=env,
                                stdout=subprocess.DEVNULL, stderr=fh)
    sidecar = out / "site.nc.progress.json"
    deadline = time.monotonic() + 120
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            try:
                if len(json.loads(sidecar.read_text())["done"]) >= wait_chunks:
                    break
            except (OSError, ValueError, KeyError):
                pass
            time.sleep(0.02)
        time.sleep(extra)
        assert proc.poll() is None, "the run ended before it could be killed: " + \
            log.read_text(errors="replace")[-2000:]
        workers = _descendants(proc.pid)
        assert len(workers) >= 2  # the pool was running
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    gone_by = time.monotonic() + 15
    while time.monotonic() < gone_by and any(_running(p) for p in workers):
        time.sleep(0.1)
    assert not [p for p in workers if _running(p)], "orphan worker processes"
    debris = temporaries(out)
    assert debris  # the killed run left its unfinished NetCDF file behind
    done = json.loads(sidecar.read_text())["done"]
    assert 1 <= len(done) < N_KILL_BORINGS

    resumed = subprocess.run(_site_command(site_file, out), env=env, capture_output=True,
                             timeout=300)
    assert resumed.returncode == 0, resumed.stderr.decode(errors="replace")[-3000:]
    assert b"Resumed" in resumed.stderr
    same_site_file(out / "site.nc", reference.netcdf)
    assert (out / "site_borings.csv").read_bytes() == Path(reference.csv).read_bytes()
    assert temporaries(out) == []
    assert not resume_state(out) & set(out.iterdir())


# ------------------------------------------------------------------------- the helper
def test_output_set_rolls_back_when_a_rename_fails(tmp_path, monkeypatch):
    """Three files, the third rename refused: the first two are put back."""
    names = [tmp_path / f"f{i}.txt" for i in range(3)]
    for i, path in enumerate(names):
        path.write_text(f"old {i}")
    monkeypatch.setattr(os, "replace", replace_failing_for("f2.txt"))
    with pytest.raises(PermissionError):
        with OutputSet() as out:
            for i, path in enumerate(names):
                out.write(path, lambda tmp, i=i: Path(tmp).write_text(f"new {i}"))
    assert [p.read_text() for p in names] == ["old 0", "old 1", "old 2"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["f0.txt", "f1.txt", "f2.txt"]


def test_clean_stale_spares_young_files_and_live_processes(tmp_path):
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    target = tmp_path / "x.nc"
    old = time.time() - 600
    stale = tmp_path / f".x.nc.{dead.pid}-aaaaaa.part.nc"
    young = tmp_path / f".x.nc.{dead.pid}-bbbbbb.part.nc"
    live = tmp_path / f".x.nc.{os.getppid()}-cccccc.part.nc"
    other = tmp_path / f".y.nc.{dead.pid}-dddddd.part.nc"
    for path in (stale, young, live, other):
        path.write_bytes(b"partial")
    for path in (stale, live, other):
        os.utime(path, (old, old))
    assert clean_stale([target]) == [str(stale)]
    assert not stale.exists() and young.exists() and live.exists() and other.exists()


# ------------------------------------------------------------- a killed comparison
_KILLED_COMPARE = """
import sys, time
from pathlib import Path
import transport.plot.compare as figures

def stuck(alts, out_dir, stem="comparison", title=None, *, stage=None):
    # a figure half written (a name the next run will not write), then the kill
    Path(stage.reserve(Path(out_dir) / f"{stem}_extra.png")).write_bytes(b"half")
    Path(out_dir, "writing").write_text("now")
    time.sleep(120)

figures.plot_comparison = stuck
sys.argv = ["stratiflux", "compare", sys.argv[1], "-o", sys.argv[2]]
from transport.cli.main import main
main()
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="uses SIGKILL")
def test_sigkill_of_compare_then_the_next_run_leaves_no_debris(tmp_path):
    """A comparison killed (SIGKILL) while writing leaves temporaries; the next
    comparison into the same folder removes them, also that of a file it does not
    write, and keeps the files of a live run (common practice for atomic output sets:
    write, check, rename)."""
    scenario = Path(__file__).resolve().parent.parent / "scenarios" / "depot-alternatives.toml"
    out = tmp_path / "cmp"
    out.mkdir()
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(Path(__file__).resolve().parent.parent)] + sys.path))
    proc = subprocess.Popen([sys.executable, "-c", _KILLED_COMPARE, str(scenario), str(out)],
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 240
        while not (out / "writing").exists() and proc.poll() is None \
                and time.monotonic() < deadline:
            time.sleep(0.05)
        assert proc.poll() is None, "the comparison ended before it could be killed"
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    (out / "writing").unlink()
    debris = temporaries(out)
    assert len(debris) >= 3  # csv, md, nc and the half figure were staged
    live = out / f".comparison_other.png.{os.getpid()}-abcdef.part.png"  # a live run's
    live.write_bytes(b"live")
    os.utime(live, (time.time() - 3600,) * 2)
    time.sleep(1.1)  # the next run starts after the debris was last written
    again = subprocess.run([sys.executable, "-c", "import sys; sys.argv[0] = 'stratiflux'; "
                            "from transport.cli.main import main; main()", "compare",
                            str(scenario), "-o", str(out)], env=env, capture_output=True,
                           timeout=300)
    assert again.returncode == 0, again.stderr.decode(errors="replace")[-3000:]
    assert temporaries(out) == [str(live)]
    assert (out / "comparison.nc").exists() and not (out / "comparison_extra.png").exists()
