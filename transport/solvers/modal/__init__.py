"""Modal engine: the exact spectrum of the layered operator and the modal superposition.

``operator`` (coefficients, boundary rows) -> ``spectrum`` (eigenvalues by the Pruefer
angle; ``brackets``: their brackets and first iterates from a grid pass) and
``eigenfunctions`` (two-sided shooting) -> ``lifting`` (steady responses) and
``projection`` (quadrature, Green's-function integrals) -> ``sizing`` (mode count) ->
``series`` (the solution).
"""
from transport.solvers.modal.eigenfunctions import Modes, modes, modes_many
from transport.solvers.modal.operator import Operator, SpectrumError, build_operator
from transport.solvers.modal.series import ModalSeries, build_series, solve
from transport.solvers.modal.sizing import AccuracyWarning, ModeCapWarning
from transport.solvers.modal.spectrum import count_below, eigenvalues, eigenvalues_many

__all__ = ["Modes", "modes", "modes_many", "Operator", "SpectrumError", "build_operator",
           "count_below", "eigenvalues", "eigenvalues_many", "AccuracyWarning", "ModalSeries",
           "ModeCapWarning", "build_series", "solve"]
