"""Correlations for phase-boundary curves: published forms, fitting, reference equations.

Pure numpy/scipy, no I/O. Modules, one per physical topic:

* :mod:`~pipeline.correlations.base` - the form protocol, the :data:`FORMS` registry, `Curve`;
* :mod:`~pipeline.correlations.vapour_pressure` - Wagner, Wagner-type, Antoine forms;
* :mod:`~pipeline.correlations.sublimation` - sublimation forms;
* :mod:`~pipeline.correlations.melting` - Simon-Glatzel, polynomial, IAPWS melting forms;
* :mod:`~pipeline.correlations.density` - saturated liquid and vapour density forms;
* :mod:`~pipeline.correlations.linalg` - weighted linear least squares by equilibrated SVD;
* :mod:`~pipeline.correlations.fitting` - weighted, outlier-flagging fits with model selection;
* :mod:`~pipeline.correlations.reference` - published water, CO2, N2 and Ar equations.

Importing the package registers every form. Bibliographic details in docstrings are from
memory of the publications; DOIs are given only where recalled with confidence.
"""

from pipeline.correlations import density, melting, sublimation, vapour_pressure  # registers
from pipeline.correlations.base import (FORMS, CorrelationForm, Curve, LinearForm,
                                        NonlinearForm, evaluate_batch, get_form, register_form)
from pipeline.correlations.fitting import FitOutcome, fit_curve, fit_form
from pipeline.correlations.reference import (REFERENCE_CAS, REFERENCE_CONSTANTS,
                                             REFERENCE_CURVES, reference_curve,
                                             reference_fluid)

__all__ = [
    "FORMS", "CorrelationForm", "Curve", "LinearForm", "NonlinearForm", "evaluate_batch",
    "get_form", "register_form", "FitOutcome", "fit_curve", "fit_form", "REFERENCE_CONSTANTS",
    "REFERENCE_CURVES", "REFERENCE_CAS", "reference_curve", "reference_fluid", "density", "melting", "sublimation",
    "vapour_pressure",
]
