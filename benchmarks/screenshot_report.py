"""Screenshot of the HTML report in a real headless browser (Chromium), for a person to
look at: does it render without network, are the figures and tables readable?

    python benchmarks/screenshot_report.py                      # the spill demo
    python benchmarks/screenshot_report.py scenarios/sediment-cap.toml --out /tmp/shot

Writes ``<out>/report.html`` (``stratiflux report``, quick verification suite included)
and ``<out>/report.png`` (1280 x 4000 px window), and prints where they are. Chromium
is started with no network access of its own (background networking, component
updates and sync off; a fresh profile); the report must not need any. Without a
Chromium binary (Debian: ``apt-get install chromium``) the script says so and exits
with status 0 after writing the HTML.
"""
from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
BROWSERS = ("chromium", "chromium-browser", "google-chrome", "chrome")


def browser() -> str | None:
    """Path of a Chromium-family browser on PATH, or None."""
    for name in BROWSERS:
        found = shutil.which(name)
        if found:
            return found
    return None


def screenshot(html: Path, png: Path, exe: str, size=(1280, 4000)) -> None:
    """Headless Chromium renders ``html`` into ``png`` (no network, fresh profile)."""
    with tempfile.TemporaryDirectory() as profile:
        subprocess.run([exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                        "--no-first-run", "--disable-background-networking",
                        "--disable-component-update", "--disable-sync",
                        f"--user-data-dir={profile}", f"--screenshot={png}",
                        f"--window-size={size[0]},{size[1]}", "--hide-scrollbars",
                        html.resolve().as_uri()],
                       check=True, capture_output=True, timeout=120)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("scenario", nargs="?",
                        default=str(ROOT / "scenarios" / "spill-layered-column.toml"))
    parser.add_argument("--out", default=None, help="folder (default: a new temporary one)")
    args = parser.parse_args(argv)
    out = Path(args.out or tempfile.mkdtemp(prefix="stratiflux-report-"))
    out.mkdir(parents=True, exist_ok=True)
    html, png = out / "report.html", out / "report.png"
    subprocess.run([sys.executable, "-m", "transport.cli.main", "report", args.scenario,
                    "-o", str(html)], check=True)
    print(f"report: {html}")
    exe = browser()
    if exe is None:
        print("SKIPPED screenshot: no Chromium found on PATH (Debian: apt-get install "
              "chromium); open the report in any browser instead.")
        return 0
    screenshot(html, png, exe)
    print(f"screenshot: {png}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
