"""data.reduced-chi-square: a fit whose reduced chi-square is far from 1 names the stated
uncertainties as the likely cause (real fits of noisy samples of a published equation)."""

from __future__ import annotations

import numpy as np
import pytest

from check_fixtures import sample_series
from pipeline.checks import FluidData
from pipeline.checks.inputs import FittedCurve
from pipeline.checks.fit_quality import reduced_chi2
from pipeline.checks.thresholds import Thresholds
from pipeline.correlations import reference_curve
from pipeline.correlations.regression import fit_curve

# Argon: Tegeler, Span & Wagner (1999) vapour-pressure ancillary and critical point
# Tc = 150.687 K, pc = 4.863 MPa (via pipeline.correlations.reference).
VAP = reference_curve("argon", "liquid-vapour", "pressure")
TC = 150.687
NOISE = 1e-3          # relative standard deviation of the noise drawn for the lab file


def _fluid(u_stated: float, *, kind: str = "measurement", noise: float = NOISE) -> FluidData:
    """Argon with one vapour-pressure file (40 points, noise ``noise``, stated relative
    uncertainty ``u_stated``) fitted by the fit stage's fitter."""
    T = np.linspace(90.0, 148.0, 40)
    frame = sample_series(VAP, T, boundary="liquid-vapour", source_id="lab-x", source_kind=kind,
                          u_rel=u_stated)
    rng = np.random.default_rng(7)
    frame["value_si"] *= 1.0 + noise * rng.standard_normal(len(T))
    frame["u_value_si"] = u_stated * frame["value_si"]
    outcome = fit_curve("wagner-2.5-5", T, frame["value_si"].to_numpy(),
                        frame["u_value_si"].to_numpy(), 0.0, {"T_ref_K": TC}, n_terms=4)
    assert outcome.fitted
    frame["fit_id"], frame["z"] = "fit-1", outcome.z
    frame["is_outlier"] = outcome.outlier_mask
    curve = FittedCurve(outcome.curve, "fit-1", outcome.form, outcome.n_used,
                        outcome.reduced_chi2)
    return FluidData.build("argon", 0.039948, observations=frame,
                           curves={("liquid-vapour", "", "pressure"): curve})


def _finding(fluid: FluidData):
    (f,) = reduced_chi2(fluid, Thresholds.load().for_check("data.reduced-chi-square", "argon"))
    return f


def test_stated_uncertainties_that_match_the_scatter_pass():
    """Noise equal to the stated uncertainty gives a reduced chi-square near 1: pass."""
    f = _finding(_fluid(NOISE))
    assert f.status == "pass" and 0.5 < f.measured < 1.6
    assert f.subject == "curve:liquid-vapour" and f.statistic == "reduced chi-square"


def test_uncertainties_far_larger_than_the_scatter_warn_naming_the_source():
    """Stated u 20x the noise gives chi2_nu ~ 1/400 < 0.01: violated, naming the lab file's
    source and the usual slips (expanded uncertainty entered as standard, percent...)."""
    f = _finding(_fluid(20 * NOISE))
    assert f.status == "violated" and f.measured == pytest.approx(1 / 400, rel=0.5)
    assert f.limit == 0.01
    assert "likely too large: lab-x (measurement, 40 points" in f.message
    assert "expanded (k = 2)" in f.message
    assert f.evidence["sources"][0]["source"] == "lab-x"
    assert f.evidence["birge_ratio"] == pytest.approx(f.measured ** 0.5)


def test_uncertainties_far_smaller_than_the_scatter_warn_too():
    """Stated u a tenth of the noise: the fitter flags the points beyond |z| = 4 and the rest
    still give chi2_nu > 4: violated, 'likely too small'."""
    f = _finding(_fluid(NOISE / 10))
    assert f.status == "violated" and f.measured > 4.0 and f.limit == 4.0
    assert "likely too small: lab-x" in f.message


def test_equation_samples_pass_as_expected():
    """Noise-free samples of an evaluated equation give chi2_nu far below 1 (only the form's
    misfit is left): expected of an equation's samples, whose stated u is its own type B
    uncertainty, so the finding passes and says why (no warning a curator must waive)."""
    f = _finding(_fluid(1e-3, kind="evaluated", noise=0.0))
    assert f.status == "pass" and f.measured < 1e-3
    assert "samples of an evaluated equation" in f.message and "type B" in f.message


def test_the_same_low_value_from_a_lab_is_reported():
    """The same noise-free points stated by a lab ('measurement') are reported: a lab's scatter
    far below its stated u means the u is wrong (e.g. k = 2 entered as k = 1)."""
    f = _finding(_fluid(1e-3, kind="measurement", noise=0.0))
    assert f.status == "violated" and "likely too large" in f.message


def test_too_few_degrees_of_freedom_skip():
    """A fit with fewer than min_dof degrees of freedom is skipped with the reason."""
    fluid = _fluid(NOISE)
    th = dict(Thresholds.load().for_check("data.reduced-chi-square"), min_dof=100)
    (f,) = reduced_chi2(fluid, th)
    assert f.status == "skip" and "degrees of freedom" in f.message
