"""Output depth grids of staged runs stay the size the user asked for (issue: a 5 cm
spacing over a cap crashed with an 8 PiB allocation, because a layer face a hair away
from a grid depth was taken as the grid spacing)."""
from pathlib import Path

import numpy as np

from transport.scenario.schema import parse_alternatives

DEPOT = Path(__file__).resolve().parents[1] / "scenarios" / "depot-alternatives.toml"


def test_cap_depths_follow_the_spacing_not_the_closest_face():
    text = DEPOT.read_text(encoding="utf-8")
    assert 'depth_spacing = "1 cm"' in text
    alts = parse_alternatives(text.replace('depth_spacing = "1 cm"', 'depth_spacing = "5 cm"'),
                              str(DEPOT))
    capped = 0
    for sc in alts:
        d = np.asarray(sc.output.depths)
        above = d[d < 0]
        if above.size == 0:
            continue
        capped += 1
        # the cap is sampled at the asked spacing (common practice: one grid for the
        # whole run), plus its faces
        gaps = np.diff(np.concatenate([above, [0.0]]))
        assert np.median(gaps) > 0.04
        assert d.size < 2 * (d.max() - d.min()) / 0.05 + 50
    assert capped >= 1
