"""Several actions at one time: applied in the order written, as one stage.

Checked against the same actions composed by hand into one stage (the column, offset
and carry factors written out from the definitions in ``transport.solvers.stages``:
excavated soil leaves, cap layers start clean, an amended layer keeps its mass in place,
C_new = C_old (theta R)_old / (theta R)_new), and against the limit of the actions at
distinct times drawn together.
"""
from dataclasses import replace

import numpy as np
import pytest

from transport.model.column import Boundary, Column, Layer
from transport.scenario.schema import ScenarioError, parse_scenario
from transport.solvers.stages import Stage, compose_carry
from transport.solvers.timeline import (Timeline, amend_layer, excavate, place_cap,
                                        set_flow, solve_timeline)
from transport.units import YEAR

TS = 6 * YEAR
T = np.array([3.0, 7.0, 20.0, 50.0]) * YEAR


def _column():
    return Column(layers=(Layer(0.5, 0.35, 6e-10, 2.0, name="fill"),
                          Layer(0.4, 0.45, 8e-11, 5.0, name="silt", decay_rate=2e-9),
                          Layer(1.1, 0.3, 7e-10, 1.5, name="sand")),
                  top=Boundary("concentration", 1.0), bottom=Boundary("free-outflow"),
                  darcy_flux=0.01 / YEAR)


CAP = (Layer(0.4, 0.4, 3e-10, 3.0, name="cap"),)


def _close(a, b):
    np.testing.assert_allclose(a.concentration, b.concentration, atol=1e-9, equal_nan=True)
    for k in ("stored", "entered_top", "left_bottom", "decayed", "removed"):
        np.testing.assert_allclose(a.budget[k], b.budget[k], atol=1e-9 * np.abs(
            b.budget["stored"]).max())


def test_excavate_then_cap_equals_the_stage_by_hand():
    """Dig out 0.3 m and place a 0.4 m cap (sealed top) at 6 yr: the fill keeps 0.2 m,
    the cap sits on it, its top 0.1 m above the original surface; the cap starts clean,
    the soil keeps its state."""
    col = _column()
    z = np.array([-0.1, 0.1, 0.3, 0.6, 1.5, 2.0])
    both = Timeline.single(col).then(TS, excavate(0.3)).then(
        TS, place_cap(CAP, top=Boundary("sealed")))
    assert len(both.stages) == 2

    def by_hand(stage):
        layers = CAP + (replace(col.layers[0], thickness=0.2),) + col.layers[1:]
        return Stage(stage.start, Column(layers, Boundary("sealed"), col.bottom,
                                         col.darcy_flux), 0.3 - 0.4, (None, 1.0, 1.0, 1.0))
    hand = Timeline.single(col).then(TS, by_hand)
    _close(solve_timeline(both, T, z), solve_timeline(hand, T, z))


def test_amend_then_new_flow_equals_the_stage_by_hand():
    """Amend the silt (R 5 -> 20) and lower the flow at the same time: one stage whose
    silt carries C (theta R)_old / (theta R)_new = 5/20 of its concentration."""
    col = _column()
    z = np.array([0.2, 0.7, 1.5])
    q2 = 0.002 / YEAR
    both = Timeline.single(col).then(TS, amend_layer("silt", retardation=20.0)).then(
        TS, set_flow(q2))

    def by_hand(stage):
        layers = (col.layers[0], replace(col.layers[1], retardation=20.0), col.layers[2])
        return Stage(stage.start, Column(layers, col.top, col.bottom, q2), 0.0,
                     (1.0, 5.0 / 20.0, 1.0))
    hand = Timeline.single(col).then(TS, by_hand)
    assert both.stages[-1].carry == pytest.approx(hand.stages[-1].carry)
    _close(solve_timeline(both, T, z), solve_timeline(hand, T, z))


def test_carry_composes_through_a_cut_and_a_cap():
    """compose_carry: a layer new in either action starts clean; others multiply."""
    col = _column()
    first = Timeline.single(col).then(TS, amend_layer("fill", retardation=4.0)).stages[-1]
    second = excavate(0.2)(first)
    assert compose_carry(first, second) == pytest.approx((0.5, 1.0, 1.0))
    capped = place_cap(CAP)(second)
    assert compose_carry(first, capped)[0] is None


_SCENARIO = """
[chemical]
free_water_diffusivity = "1e-9 m^2/s"
[flow]
darcy_flux = "0.05 m/yr"
[[layers]]
name = "fill"
thickness = "0.6 m"
porosity = 0.35
[[layers]]
name = "sand"
thickness = "1.4 m"
porosity = 0.3
[top]
kind = "concentration"
concentration = "10 mg/L"
[bottom]
kind = "free-outflow"
[output]
times = ["1 yr", "5 yr", "20 yr"]
"""
_CAP = ('layers = [{ name = "cap", thickness = "0.3 m", porosity = 0.4, '
        'pore_diffusivity = "2e-10 m^2/s" }]')


def test_scenario_actions_at_one_time_apply_in_the_order_written():
    text = _SCENARIO + f"""
[[actions]]
at = "2 yr"
kind = "excavate"
depth = "0.5 m"
[[actions]]
at = "2 yr"
kind = "place-cap"
{_CAP}
"""
    sc = parse_scenario(text)
    assert len(sc.timeline.stages) == 2
    last = sc.timeline.stages[-1]
    assert [l.name for l in last.column.layers] == ["cap", "fill", "sand"]
    assert last.offset == pytest.approx(0.5 - 0.3)
    swapped = text.replace('kind = "excavate"\ndepth = "0.5 m"', "KEEP").replace(
        f'kind = "place-cap"\n{_CAP}', 'kind = "excavate"\ndepth = "0.5 m"').replace(
        "KEEP", f'kind = "place-cap"\n{_CAP}')
    other = parse_scenario(swapped).timeline.stages[-1]  # cap dug out again, then 0.2 m
    assert [l.name for l in other.column.layers] == ["fill", "sand"]


def test_scenario_actions_out_of_order_are_refused():
    text = _SCENARIO + """
[[actions]]
at = "3 yr"
kind = "remove-source"
[[actions]]
at = "2 yr"
kind = "set-flow"
darcy_flux = "0.01 m/yr"
"""
    with pytest.raises(ScenarioError, match="time order"):
        parse_scenario(text)
