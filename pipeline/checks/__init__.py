"""Thermodynamic consistency checks (DESIGN §5): registry, engine, and the check catalogue.

Typical use::

    from pipeline.checks import load_fluid_data, run_checks
    run = run_checks(load_fluid_data(con), tags=["critical"], con=con)
    print(run.asstr()); run.exit_code()

Each check lives in a topic module (``triple_point``, ``clapeyron``, ``critical``,
``metastable``, ``phase_rule``, ``data_level``, ``unit_mixup``, ``sources``, ``acentric``,
``fit_quality``) as one function registered with :func:`register_check`; it receives all
selected fluids (a :class:`CheckBatch`) and returns its findings as columns
(:class:`Findings`); the run keeps its results as columns (:class:`ResultTable`) to the store.
``fluidledger explain CHECK_ID`` prints a check's physics and the thresholds in force.
"""

from pipeline.checks.data import CheckBatch, FittedCurve, FluidData, ObsSeries, sample_series
from pipeline.checks.engine import POSTPROCESSORS, run_checks, store_run
from pipeline.checks.loader import load_fluid_data
from pipeline.checks.findings import Finding, Findings, Status, judge, skipped
from pipeline.checks.registry import (
    CheckSpec,
    all_checks,
    all_tags,
    get_check,
    register_check,
    select_checks,
)
from pipeline.checks.results import CheckResult, CheckRun, ResultTable
from pipeline.checks.thresholds import Thresholds

__all__ = [
    "CheckBatch", "CheckResult", "CheckRun", "CheckSpec", "FittedCurve", "Finding", "Findings",
    "FluidData", "ObsSeries", "POSTPROCESSORS", "ResultTable", "Status", "Thresholds",
    "all_checks", "all_tags", "get_check",
    "judge", "load_fluid_data", "register_check", "run_checks", "sample_series",
    "select_checks", "skipped", "store_run",
]
