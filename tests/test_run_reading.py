"""The reading printed by ``stratiflux run`` never contradicts itself: the end-of-run
sentence and the whole-run flag come from the same trend test (C at the end rises by more
than twice its error bound; common practice for a reading within a stated tolerance)."""
from pathlib import Path

import pytest
from click.testing import CliRunner

from transport.cli.main import main

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


@pytest.mark.parametrize("name", ["spill-layered-column", "sediment-cap",
                                  "landfill-composite-liner"])
def test_end_of_run_sentence_agrees_with_the_whole_run_flag(name, tmp_path):
    out = CliRunner().invoke(main, ["run", str(SCENARIOS / f"{name}.toml"),
                                    "-o", str(tmp_path / "r.nc")])
    assert out.exit_code == 0, out.output
    text = " ".join(out.output.split())
    if "at the end of the run" not in text:
        pytest.skip("the peak lies inside the run")
    rising = "still rising there, so the peak lies beyond the run" in text
    steady = "at steady state there (flat within the tolerance)" in text
    assert rising != steady
    flag = "peak after the end of the run: yes" in text
    assert flag == rising
