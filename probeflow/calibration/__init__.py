"""Electrode calibration: the model, fitting to buffer points, acceptance limits.

The calibration store and the ``calibrate`` command live elsewhere; this package
holds only the arithmetic.  See :mod:`probeflow.calibration.model` for the model.
"""

from probeflow.calibration.acceptance import AcceptanceLimits, Verdict, judge
from probeflow.calibration.fitting import MIN_PH_SPAN, design_matrix, fit_calibration
from probeflow.calibration.model import Calibration, CalibrationPoint

__all__ = [
    "MIN_PH_SPAN",
    "AcceptanceLimits",
    "Calibration",
    "CalibrationPoint",
    "Verdict",
    "design_matrix",
    "fit_calibration",
    "judge",
]
