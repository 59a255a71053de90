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
