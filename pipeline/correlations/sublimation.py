"""Sublimation-pressure (solid-vapour boundary) correlation forms.

Forms: the power sum in (1 - T/Tt) used by the Span-Wagner CO2, the Tegeler et al. argon and the
Span et al. nitrogen sublimation equations, and the IAPWS R14-08 form for ice Ih.
"""

from __future__ import annotations

import numpy as np

from pipeline.correlations.base import LinearForm, TauPowerBasis, dpower, power, register_form


class SublimationPower(TauPowerBasis, LinearForm):
    """Sublimation pressure as a power sum in (1 - T/Tt).

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(pt / Pa), fitted. [-]
    a1..ak : float
        Coefficients of (1 - T/Tt)^t_i. [-]

    ``ref["T_ref_K"]`` is the triple-point temperature Tt [K]; ``ref["exponents"]`` the t_i.
    Default exponents 1, 1.9, 2.9 (Span & Wagner 1996, Eq. 3.12).

    Notes
    -----
    .. math:: \\ln p = \\ln p_t + \\frac{T_t}{T}\\sum_i a_i \\left(1 - \\frac{T}{T_t}\\right)^{t_i}

    Defined for T <= Tt. With pt fitted, p_sub(Tt) = pt is a check, not an identity.

    References
    ----------
    .. [1] R. Span, W. Wagner, "A new equation of state for carbon dioxide covering the fluid
       region from the triple-point temperature to 1100 K at pressures up to 800 MPa",
       J. Phys. Chem. Ref. Data 25, 1509-1596 (1996), doi:10.1063/1.555991, Eq. (3.12).
    .. [2] Ch. Tegeler, R. Span, W. Wagner, J. Phys. Chem. Ref. Data 28, 779-850 (1999),
       doi:10.1063/1.556037.
    """

    name = "sublimation-power"
    quantity = "pressure"
    link = "log"
    increasing = True
    reference_point = "triple"
    prefactor = True
    default_exponents = (1.0, 1.9, 2.9)
    citation = "R. Span, W. Wagner, J. Phys. Chem. Ref. Data 25, 1509-1596 (1996), Eq. (3.12)"


class IapwsSublimation(LinearForm):
    """IAPWS R14-08(2011) sublimation-pressure form for ice Ih.

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(pt / Pa), fitted (published: pt = 611.657 Pa). [-]
    a1..ak : float
        Coefficients. [-]

    ``ref["T_ref_K"]`` = Tt = 273.16 K; ``ref["exponents"]`` the b_i (default: the release's
    0.333333333e-2, 0.120666667e1, 0.170333333e1).

    Notes
    -----
    .. math:: \\ln(p/p_t) = \\theta^{-1}\\sum_i a_i\\theta^{b_i}, \\qquad \\theta = T/T_t

    The basis functions are theta^(b_i - 1). Defined for T <= Tt (valid 50 K to 273.16 K).

    References
    ----------
    .. [1] IAPWS R14-08(2011), "Revised Release on the Pressure along the Melting and
       Sublimation Curves of Ordinary Water Substance"; W. Wagner, T. Riethmann,
       R. Feistel, A. H. Harvey, J. Phys. Chem. Ref. Data 40, 043103 (2011),
       doi:10.1063/1.3657937.
    """

    name = "iapws-sublimation"
    quantity = "pressure"
    link = "log"
    increasing = True
    reference_point = "triple"
    bounded_by_reference = True
    default_exponents = (0.333333333e-2, 0.120666667e1, 0.170333333e1)
    citation = "IAPWS R14-08(2011); Wagner et al., J. Phys. Chem. Ref. Data 40, 043103"

    def basis(self, T, T_ref, exps):
        theta = T / T_ref
        return np.stack([power(theta, b - 1.0) for b in exps], axis=-1)

    def dbasis(self, T, T_ref, exps):
        theta = T / T_ref
        return np.stack([dpower(theta, b - 1.0) / T_ref for b in exps], axis=-1)


SUBLIMATION_POWER = register_form(SublimationPower())
IAPWS_SUBLIMATION = register_form(IapwsSublimation())
