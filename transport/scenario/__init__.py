"""Scenario files: TOML in, a validated SI :class:`Scenario` out.

The public surface: load a file (:func:`load_scenario`, :func:`load_alternatives`) or
parse text (:func:`parse_scenario`, :func:`parse_alternatives`); the readers of one
table each (:func:`read_chemical`, :func:`read_layer`, :func:`read_boundary`,
:func:`read_times`, :func:`read_output`) bound to a file by a :class:`Reader`, for
other file kinds (sites) that share the scenario tables. Every problem is a
:class:`ScenarioError` naming the file, the key path, the value, what is allowed and
the fix.
"""
from transport.scenario.layers import ChemicalSpec, layer_detail, read_chemical, read_layer
from transport.scenario.output import OutputSpec, depth_grid, read_output, read_times
from transport.scenario.reader import MISSING, Reader, ScenarioError, parse_toml, read_text_file
from transport.scenario.schema import (Scenario, load_alternatives, load_scenario,
                                       parse_alternatives, parse_scenario, read_boundary,
                                       starter_scenario_text)

__all__ = ["Scenario", "ScenarioError", "ChemicalSpec", "OutputSpec", "Reader", "MISSING",
           "load_scenario", "load_alternatives", "parse_scenario", "parse_alternatives",
           "starter_scenario_text", "read_text_file", "parse_toml", "read_chemical",
           "read_layer", "layer_detail", "read_boundary", "read_times", "read_output",
           "depth_grid"]
