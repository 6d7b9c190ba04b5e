"""Vapour-pressure (liquid-vapour boundary) correlation forms.

Forms: the Wagner equation with the 3-6 and the 2.5-5 exponent sets, the general Wagner-type
sum with arbitrary exponents (IAPWS SR1-86 and the CO2, N2, Ar ancillary equations), the Antoine
equation and an extended Antoine equation with Riedel's ln T and T^F terms.
"""

from __future__ import annotations

import numpy as np

from pipeline.correlations.base import (LinearForm, NonlinearForm, TauPowerBasis, power,
                                        register_form)
from pipeline.correlations.linalg import weighted_linear_solve

WAGNER_CITATION = "W. Wagner, Cryogenics 13, 470-482 (1973)"
WAGNER_PRUSS_CITATION = ("W. Wagner, A. Pruss, J. Phys. Chem. Ref. Data 22, 783-787 (1993), "
                         "doi:10.1063/1.555926")


class _WagnerBase(TauPowerBasis, LinearForm):
    quantity = "pressure"
    link = "log"
    increasing = True
    reference_point = "critical"
    prefactor = True


class Wagner36(_WagnerBase):
    """Wagner vapour-pressure equation, exponent set 3-6.

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(pc / Pa), fitted. [-]
    a1..a4 : float
        Coefficients of tau, tau^1.5, tau^3, tau^6 (a truncated series uses the first k). [-]

    ``ref["T_ref_K"]`` is the critical temperature Tc. [K]

    Notes
    -----
    .. math:: \\ln p = \\ln p_c + \\frac{T_c}{T}\\left(a_1\\tau + a_2\\tau^{1.5} + a_3\\tau^3
              + a_4\\tau^6\\right), \\qquad \\tau = 1 - T/T_c

    Linear in (ln pc, a_i); defined for T <= Tc.

    References
    ----------
    .. [1] W. Wagner, "New vapour pressure measurements for argon and nitrogen and a new method
       for establishing rational vapour pressure equations", Cryogenics 13, 470-482 (1973).
    """

    name = "wagner-3-6"
    default_exponents = (1.0, 1.5, 3.0, 6.0)
    fixed_exponents = True
    citation = WAGNER_CITATION


class Wagner255(_WagnerBase):
    """Wagner vapour-pressure equation, exponent set 2.5-5.

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(pc / Pa), fitted. [-]
    a1..a4 : float
        Coefficients of tau, tau^1.5, tau^2.5, tau^5. [-]

    Notes
    -----
    .. math:: \\ln p = \\ln p_c + \\frac{T_c}{T}\\left(a_1\\tau + a_2\\tau^{1.5} + a_3\\tau^{2.5}
              + a_4\\tau^5\\right), \\qquad \\tau = 1 - T/T_c

    The 2.5-5 set is the one recommended in later work of the Wagner group and used, for
    example, for the nitrogen vapour-pressure ancillary of Span et al. (2000).

    References
    ----------
    .. [1] W. Wagner, Cryogenics 13, 470-482 (1973).
    .. [2] W. Wagner, A. Pruss, "International equations for the saturation properties of
       ordinary water substance. Revised according to the International Temperature Scale of
       1990", J. Phys. Chem. Ref. Data 22, 783-787 (1993), doi:10.1063/1.555926.
    """

    name = "wagner-2.5-5"
    default_exponents = (1.0, 1.5, 2.5, 5.0)
    fixed_exponents = True
    citation = f"{WAGNER_CITATION}; {WAGNER_PRUSS_CITATION}"


class WagnerPruss6(_WagnerBase):
    """Wagner-type vapour-pressure sum with the six exponents of Wagner & Pruss (1993).

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(pc / Pa), fitted. [-]
    a1..a6 : float
        Coefficients of tau, tau^1.5, tau^3, tau^3.5, tau^4, tau^7.5. [-]

    Notes
    -----
    .. math:: \\ln p = \\ln p_c + \\frac{T_c}{T}\\sum_i a_i \\tau^{t_i},\\qquad
              t = 1, 1.5, 3, 3.5, 4, 7.5

    The exponent set of the IAPWS SR1-86(1992) saturation-pressure equation for water; wide
    ranges (triple point to critical point) with small uncertainties need its extra terms.

    References
    ----------
    .. [1] W. Wagner, A. Pruss, J. Phys. Chem. Ref. Data 22, 783-787 (1993),
       doi:10.1063/1.555926.
    """

    name = "wagner-pruss-6"
    default_exponents = (1.0, 1.5, 3.0, 3.5, 4.0, 7.5)
    fixed_exponents = True
    citation = WAGNER_PRUSS_CITATION


class WagnerType(_WagnerBase):
    """Wagner-type vapour-pressure sum with arbitrary exponents given in ``ref["exponents"]``.

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(pc / Pa), fitted. [-]
    a1..ak : float
        Coefficients of tau^t_1 .. tau^t_k. [-]

    Notes
    -----
    .. math:: \\ln p = \\ln p_c + \\frac{T_c}{T}\\sum_i a_i \\tau^{t_i}

    Default exponents are those of IAPWS SR1-86(1992): 1, 1.5, 3, 3.5, 4, 7.5. The same form
    with other exponents expresses the CO2 (Span & Wagner 1996, Eq. 3.13: 1, 1.5, 2, 4) and
    argon (Tegeler et al. 1999: 1, 1.5, 2, 4.5) ancillary equations.

    References
    ----------
    .. [1] W. Wagner, A. Pruss, J. Phys. Chem. Ref. Data 22, 783-787 (1993).
    .. [2] W. Wagner, Cryogenics 13, 470-482 (1973).
    """

    name = "wagner-type"
    default_exponents = (1.0, 1.5, 3.0, 3.5, 4.0, 7.5)
    citation = f"{WAGNER_PRUSS_CITATION}; {WAGNER_CITATION}"


class Antoine(NonlinearForm):
    """Antoine vapour-pressure equation in SI units with the natural logarithm.

    Parameters (in order)
    ---------------------
    A : float
        [-] (ln of pressure in Pa)
    B : float
        [K]
    C : float
        [K]; the optimiser keeps T + C > 0 over the data.

    Notes
    -----
    .. math:: \\ln(p/\\mathrm{Pa}) = A - \\frac{B}{T + C}

    Suited to short ranges well below Tc; no reference point.

    References
    ----------
    .. [1] C. Antoine, "Tensions des vapeurs; nouvelle relation entre les tensions et les
       temperatures", C. R. Acad. Sci. 107, 681-684, 778-780, 836-837 (1888).
    """

    name = "antoine"
    quantity = "pressure"
    link = "log"
    increasing = True
    n_fixed = 3
    citation = "C. Antoine, C. R. Acad. Sci. 107, 681-684, 778-780, 836-837 (1888)"

    def _ln_p(self, T, P, exps):
        return P[:, :1] - P[:, 1:2] / (T + P[:, 2:3])

    def evaluate(self, T, P, T_ref, exps):
        with np.errstate(over="ignore"):
            return np.exp(self._ln_p(T, P, exps))

    def derivative(self, T, P, T_ref, exps):
        return self.evaluate(T, P, T_ref, exps) * P[:, 1:2] / (T + P[:, 2:3]) ** 2

    def jacobian(self, T, P, T_ref, exps):
        y = self.evaluate(T, P, T_ref, exps)
        s = T + P[:, 2:3]
        B = P[:, 1:2]
        return np.stack([y, -y / s, y * B / s**2], axis=-1)

    def _linear_columns(self, T, C, exps):
        return np.stack([np.ones_like(T), -1.0 / (T + C)], axis=1)

    def _c_grid(self, T):
        return np.linspace(-0.9 * T.min(), 0.5 * T.min(), 57)

    def initial_params(self, T, z, w, T_ref, exps):
        """Profile the linear parameters over a grid of C and keep the best."""
        best, best_chi2 = None, np.inf
        for C in self._c_grid(T):
            beta, _, rank = weighted_linear_solve(self._linear_columns(T, C, exps), z, np.sqrt(w))
            if rank < 2:
                continue
            chi2 = np.sum(w * (z - self._linear_columns(T, C, exps) @ beta) ** 2)
            if chi2 < best_chi2:
                best, best_chi2 = np.concatenate([beta, [C]]), chi2
        return best if best is not None else np.array([np.mean(z), 0.0, 0.0])

    def bounds(self, T, T_ref):
        lo = np.full(self.n_fixed, -np.inf)
        hi = np.full(self.n_fixed, np.inf)
        lo[2] = -0.99 * T.min()
        return lo, hi


class AntoineExtended(Antoine):
    """Extended Antoine equation: Antoine's form with Riedel's ln T and T^F terms.

    Parameters (in order)
    ---------------------
    A : float
        [-]
    B : float
        [K]
    C : float
        [K]
    D : float
        Coefficient of ln(T/K). [-]
    E : float
        Coefficient of (T/K)^F. [K^-F]

    ``ref["exponents"] = (F,)``; default F = 6 as in Riedel's equation.

    Notes
    -----
    .. math:: \\ln(p/\\mathrm{Pa}) = A - \\frac{B}{T + C} + D\\ln T + E\\,T^F

    With C = 0 and F = 6 this is Riedel's vapour-pressure equation; the C term gives the
    Antoine curvature at low temperature. Nonlinear in C only.

    References
    ----------
    .. [1] C. Antoine, C. R. Acad. Sci. 107, 681-684 (1888).
    .. [2] L. Riedel, "Eine neue universelle Dampfdruckformel", Chem. Ing. Tech. 26, 83-89
       (1954).
    """

    name = "antoine-extended"
    n_fixed = 5
    default_exponents = (6.0,)
    citation = ("C. Antoine, C. R. Acad. Sci. 107, 681-684 (1888); L. Riedel, "
                "Chem. Ing. Tech. 26, 83-89 (1954)")

    def _ln_p(self, T, P, exps):
        F = exps[0]
        return super()._ln_p(T, P, exps) + P[:, 3:4] * np.log(T) + P[:, 4:5] * power(T, F)

    def derivative(self, T, P, T_ref, exps):
        F = exps[0]
        dln = (P[:, 1:2] / (T + P[:, 2:3]) ** 2 + P[:, 3:4] / T
               + P[:, 4:5] * F * power(T, F - 1.0))
        return self.evaluate(T, P, T_ref, exps) * dln

    def jacobian(self, T, P, T_ref, exps):
        y = self.evaluate(T, P, T_ref, exps)
        base = super().jacobian(T, P, T_ref, exps)
        extra = np.stack([y * np.log(T), y * power(T, exps[0])], axis=-1)
        return np.concatenate([base, extra], axis=-1)

    def _linear_columns(self, T, C, exps):
        return np.stack([np.ones_like(T), -1.0 / (T + C), np.log(T), power(T, exps[0])], axis=1)

    def initial_params(self, T, z, w, T_ref, exps):
        p = super().initial_params(T, z, w, T_ref, exps)
        if p.size == self.n_fixed:
            return np.concatenate([p[:2], p[4:5], p[2:4]])  # (A, B, D, E, C) -> (A, B, C, D, E)
        return np.concatenate([p, [0.0, 0.0]])


WAGNER_3_6 = register_form(Wagner36())
WAGNER_2_5_5 = register_form(Wagner255())
WAGNER_PRUSS_6 = register_form(WagnerPruss6())
WAGNER_TYPE = register_form(WagnerType())
ANTOINE = register_form(Antoine())
ANTOINE_EXTENDED = register_form(AntoineExtended())
