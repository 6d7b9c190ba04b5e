"""Saturated liquid and vapour density correlation forms (liquid-vapour boundary).

Forms: the power sum rho/rho_c = 1 + sum b_i tau^t_i (IAPWS SR1-86 liquid density) and the
logarithmic sums ln(rho/rho_c) = [Tc/T] sum c_i tau^t_i, without the Tc/T factor (SR1-86 vapour
density, Span-Wagner CO2 Eqs. 3.14/3.15) and with it (N2 and Ar vapour-density ancillaries).
All have tau = 1 - T/Tc and are defined for T <= Tc.
"""

from __future__ import annotations

from pipeline.correlations.base import LinearForm, TauPowerBasis, register_form
from pipeline.correlations.vapour_pressure import WAGNER_PRUSS_CITATION


class _DensityBase(TauPowerBasis, LinearForm):
    quantity = "density"
    reference_point = "critical"


class DensityPower(_DensityBase):
    """Saturated density as rho/rho_c = 1 + sum b_i tau^t_i.

    Parameters (in order)
    ---------------------
    ref : float
        rho_c, fitted. [kg/m^3]
    b1..bk : float
        Coefficients of tau^t_i. [-]

    ``ref["T_ref_K"]`` = Tc [K]; default exponents 1/3, 2/3, 5/3, 16/3, 43/3, 110/3
    (IAPWS SR1-86 saturated liquid density).

    Notes
    -----
    .. math:: \\rho = \\rho_c\\left(1 + \\sum_i b_i\\tau^{t_i}\\right), \\qquad \\tau = 1 - T/T_c

    Fitted in density itself; linear in beta = (rho_c, rho_c b_1, ...).

    References
    ----------
    .. [1] IAPWS SR1-86(1992), Revised Supplementary Release on Saturation Properties of
       Ordinary Water Substance.
    .. [2] W. Wagner, A. Pruss, J. Phys. Chem. Ref. Data 22, 783-787 (1993).
    """

    name = "density-power"
    link = "identity"
    prefactor = False
    default_exponents = (1 / 3, 2 / 3, 5 / 3, 16 / 3, 43 / 3, 110 / 3)
    citation = f"IAPWS SR1-86(1992); {WAGNER_PRUSS_CITATION}"


class DensityLog(_DensityBase):
    """Saturated density as ln(rho/rho_c) = sum c_i tau^t_i.

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(rho_c / (kg/m^3)), fitted. [-]
    c1..ck : float
        Coefficients of tau^t_i. [-]

    ``ref["T_ref_K"]`` = Tc [K]; default exponents 1/3, 2/3, 4/3, 3, 37/6, 71/6 (IAPWS SR1-86
    saturated vapour density). Span & Wagner (1996) use this form for both CO2 densities.

    Notes
    -----
    .. math:: \\ln\\rho = \\ln\\rho_c + \\sum_i c_i\\tau^{t_i}

    References
    ----------
    .. [1] IAPWS SR1-86(1992); W. Wagner, A. Pruss, J. Phys. Chem. Ref. Data 22, 783-787
       (1993).
    .. [2] R. Span, W. Wagner, J. Phys. Chem. Ref. Data 25, 1509-1596 (1996), Eqs. (3.14),
       (3.15).
    """

    name = "density-log"
    link = "log"
    prefactor = False
    default_exponents = (1 / 3, 2 / 3, 4 / 3, 3.0, 37 / 6, 71 / 6)
    citation = (f"IAPWS SR1-86(1992); {WAGNER_PRUSS_CITATION}; R. Span, W. Wagner, "
                "J. Phys. Chem. Ref. Data 25, 1509 (1996), Eqs. (3.14), (3.15)")


class DensityLogTc(_DensityBase):
    """Saturated density as ln(rho/rho_c) = (Tc/T) sum c_i tau^t_i.

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(rho_c / (kg/m^3)), fitted. [-]
    c1..ck : float
        Coefficients. [-]

    ``ref["T_ref_K"]`` = Tc [K]; default exponents 0.34, 5/6, 7/6, 13/6, 14/3 (nitrogen
    saturated vapour density, Span et al. 2000).

    Notes
    -----
    .. math:: \\ln\\rho = \\ln\\rho_c + \\frac{T_c}{T}\\sum_i c_i\\tau^{t_i}

    The vapour-density ancillaries of nitrogen and argon need the Tc/T factor to give
    physical densities (settled by computation in the project's reference values).

    References
    ----------
    .. [1] R. Span, E. W. Lemmon, R. T. Jacobsen, W. Wagner, A. Yokozeki, J. Phys. Chem. Ref.
       Data 29, 1361-1433 (2000), doi:10.1063/1.1349047.
    .. [2] Ch. Tegeler, R. Span, W. Wagner, J. Phys. Chem. Ref. Data 28, 779-850 (1999),
       doi:10.1063/1.556037.
    """

    name = "density-log-tc"
    link = "log"
    prefactor = True
    default_exponents = (0.34, 5 / 6, 7 / 6, 13 / 6, 14 / 3)
    citation = ("R. Span et al., J. Phys. Chem. Ref. Data 29, 1361 (2000); Ch. Tegeler et al., "
                "J. Phys. Chem. Ref. Data 28, 779 (1999)")


DENSITY_POWER = register_form(DensityPower())
DENSITY_LOG = register_form(DensityLog())
DENSITY_LOG_TC = register_form(DensityLogTc())
