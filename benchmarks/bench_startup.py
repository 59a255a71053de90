"""Start-up and wall time of a single-column ``stratiflux run`` (the bundled demo, no
figures), in fresh processes, against reference interpreters started the same way.

    python benchmarks/bench_startup.py            # 5 rounds
    python benchmarks/bench_startup.py -n 11      # more rounds on a busy machine

Each round starts, one after the other (interleaved, so a change in the machine's load
falls on all of them alike):

* ``python -c pass``: the interpreter alone;
* ``python -c "import numpy, scipy"``: the reference, the least a numerical Python
  program pays;
* ``python -c "import transport.cli.main, transport.cli.run"``: the command line's
  imports;
* ``stratiflux run scenarios/spill-layered-column.toml -o <temp>/demo.nc``: the whole
  run, start-up included, output to a temporary folder;
* the same run with Python's bytecode cached in a temporary folder
  (``PYTHONPYCACHEPREFIX``, warmed by one run first), as an installed package has it:
  where the environment sets ``PYTHONDONTWRITEBYTECODE`` the first run compiles
  stratiflux's modules at every start.

Printed: best and median wall time of each, its least CPU time (user + system), the run's ratio to the reference, the
import-time breakdown of the command line by top-level package (``python -X
importtime``, one fresh process, cumulative microseconds of the first import of each
package, own time of its modules), the load average, and whether the target of the issue "Whole sites in
seconds" (the demo run under 1 s of wall time) is met by the best run.
"""
from __future__ import annotations

import argparse
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "scenarios" / "spill-layered-column.toml"
TARGET = 1.0  # s, the target for the demo run
CLI_IMPORT = "import transport.cli.main, transport.cli.run"


def run_command(out_dir: Path) -> list:
    """The ``stratiflux`` console script next to this interpreter, else its entry point
    (:func:`transport.cli.program.run`) through ``-c``."""
    args = ["run", str(DEMO), "-o", str(out_dir / "demo.nc")]
    script = Path(sys.executable).with_name("stratiflux")
    if script.exists():
        return [str(script), *args]
    return [sys.executable, "-c", "import sys; from transport.cli.program import run; "
            "sys.exit(run())", *args]


def wall(command: list, env=None) -> tuple:
    """Wall time and CPU time (user + system) of one fresh process running ``command``;
    it must succeed. On a busy machine the CPU time is the closer estimate of the wall
    time on an idle one (the process waits for a core, not for work)."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    start = time.perf_counter()
    subprocess.run(command, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                   cwd=ROOT, env=env)
    elapsed = time.perf_counter() - start
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return elapsed, cpu


def import_breakdown() -> tuple:
    """The command line's imports in one fresh ``python -X importtime`` process: the
    seconds spent in the modules of each top-level package (their own time, so the rows
    add up to the total), largest first, and the total."""
    err = subprocess.run([sys.executable, "-X", "importtime", "-c", CLI_IMPORT], check=True,
                         capture_output=True, text=True, cwd=ROOT).stderr
    own = {}
    for line in err.splitlines():
        parts = line.removeprefix("import time:").split("|")
        if len(parts) != 3 or not parts[0].strip().isdigit():
            continue  # the header line
        top = parts[2].strip().split(".")[0]
        own[top] = own.get(top, 0.0) + int(parts[0]) * 1e-6
    return sorted(own.items(), key=lambda kv: -kv[1]), sum(own.values())


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("-n", "--rounds", type=int, default=5)
    opts = parser.parse_args()
    out_dir = Path(tempfile.mkdtemp(prefix="bench_startup_"))
    cached = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    cached["PYTHONPYCACHEPREFIX"] = str(out_dir / "pycache")
    commands = {
        "python -c pass": ([sys.executable, "-c", "pass"], None),
        "reference: import numpy, scipy": ([sys.executable, "-c", "import numpy, scipy"],
                                           None),
        "CLI imports": ([sys.executable, "-c", CLI_IMPORT], None),
        "stratiflux run (demo)": (run_command(out_dir), None),
        "  same, bytecode cached": (run_command(out_dir), cached),
    }
    try:
        for command, env in commands.values():  # warm the caches (files, pint, bytecode)
            wall(command, env)
        times = {name: [] for name in commands}
        cpu = {name: [] for name in commands}
        for _ in range(opts.rounds):
            for name, (command, env) in commands.items():
                elapsed, used = wall(command, env)
                times[name].append(elapsed)
                cpu[name].append(used)
        rows, total = import_breakdown()
    finally:
        shutil.rmtree(out_dir, ignore_errors=True)

    load = os.getloadavg() if hasattr(os, "getloadavg") else None
    print(f"stratiflux start-up, {opts.rounds} rounds, {os.cpu_count()} CPUs"
          + (f", load average {load[0]:.2f} (1 min)" if load else ""))
    if load and load[0] > 0.5:
        print("  (the machine is busy: figures are slower than on an idle machine)")
    if os.environ.get("PYTHONDONTWRITEBYTECODE"):
        print("  (PYTHONDONTWRITEBYTECODE is set: stratiflux's modules are compiled at every "
              "start except in the cached row)")
    print(f"{'':34s}{'best s':>9s}{'median s':>10s}{'CPU best s':>12s}")
    for name, values in times.items():
        print(f"  {name:32s}{min(values):9.3f}{statistics.median(values):10.3f}"
              f"{min(cpu[name]):12.3f}")
    ref = min(times["reference: import numpy, scipy"])
    run = times["stratiflux run (demo)"]
    print(f"  run / reference (best)          {min(run) / ref:9.2f}")
    print(f"  run - reference (best)          {min(run) - ref:9.3f} s")
    print(f"import time of the CLI (python -X importtime, one process): {total:.3f} s; "
          "by top-level package (own time of its modules):")
    for name, seconds in rows[:12]:
        print(f"  {name:32s}{seconds:9.3f}")
    for name in ("stratiflux run (demo)", "  same, bytecode cached"):
        run = times[name]
        met = min(run) < TARGET
        print(f"target: demo run under {TARGET:g} s wall time, {name.strip()}: "
              f"{'met' if met else 'not met'} (best {min(run):.3f} s, "
              f"median {statistics.median(run):.3f} s)")


if __name__ == "__main__":
    main()
