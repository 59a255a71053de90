"""The README's Python example runs as written and its result is vouched for.

The numbers are checked against the independent mpmath Laplace solution of
tests/reference.py (Talbot inversion, Abate & Valko 2004)."""
import re
from pathlib import Path

import numpy as np

from reference import laplace_reference

README = Path(__file__).resolve().parents[1] / "README.md"


def test_readme_python_example_runs_and_matches_reference():
    code = re.search(r"```python\n(.*?)```", README.read_text(encoding="utf-8"), re.S).group(1)
    env = {}
    exec(compile(code, str(README), "exec"), env)  # noqa: S102 - our own README
    sol, col = env["sol"], env["col"]
    assert sol.reliable.all()
    z = sol.depths[::50]
    ref = laplace_reference(col, z, sol.times)
    err = np.abs(sol.concentration[:, ::50] - ref).max(axis=1)
    assert np.all(err <= sol.error["concentration"] + 1e-12 * 0.12)
    assert np.all(err <= 1e-8 * 0.12)


API_DOC = README.parent / "docs" / "api.md"


def test_api_doc_examples_run(tmp_path, monkeypatch):
    """Both worked examples of docs/api.md run as written; the column example is checked
    against the independent mpmath Laplace solution (Talbot inversion, Abate & Valko
    2004), the scenario example's NetCDF file against its own solution."""
    blocks = re.findall(r"```python\n(.*?)```", API_DOC.read_text(encoding="utf-8"), re.S)
    assert len(blocks) == 2
    scenario = README.parent / "scenarios" / "spill-layered-column.toml"
    monkeypatch.chdir(tmp_path)
    env = {}
    exec(compile(blocks[0].replace('"scenarios/spill-layered-column.toml"',  # noqa: S102
                                   repr(str(scenario))), str(API_DOC), "exec"), env)
    import xarray as xr
    with xr.open_dataset(tmp_path / "spill.nc") as ds:
        np.testing.assert_allclose(ds["concentration"].values, env["sol"].concentration,
                                   rtol=0, atol=1e-15)
    assert env["m"].first_exceedance is None or env["m"].first_exceedance > 0
    env = {}
    exec(compile(blocks[1], str(API_DOC), "exec"), env)  # noqa: S102 - our own docs
    sol, column = env["sol"], env["column"]
    assert sol.reliable.all()
    z = sol.depths[::40]
    ref = laplace_reference(column, z, sol.times)
    c_s = column.top.value
    assert np.abs(sol.concentration[:, ::40] - ref).max() <= 1e-8 * c_s
    np.testing.assert_allclose(env["c_mg_per_l"], sol.concentration * 1000.0, rtol=1e-14)
