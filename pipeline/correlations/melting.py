"""Melting-pressure (solid-liquid boundary) correlation forms.

Forms: Simon-Glatzel; the polynomial in (T/Tt - 1) of Span & Wagner (CO2); the sum of Simon
terms of Span et al. (N2) and Tegeler et al. (Ar); the IAPWS R14-08 forms for the ices.
Melting curves are fitted in pressure itself (identity link): their pressures span 0 to GPa
and the reference pressure pt is tiny in comparison.
"""

from __future__ import annotations

import numpy as np

from pipeline.correlations.base import LinearForm, NonlinearForm, dpower, power, register_form

R14_CITATION = ("IAPWS R14-08(2011), Revised Release on the Pressure along the Melting and "
                "Sublimation Curves of Ordinary Water Substance")


class _MeltingLinear(LinearForm):
    quantity = "pressure"
    link = "identity"
    reference_point = "triple"


class MeltingPolynomial(_MeltingLinear):
    """Melting pressure as a polynomial in (T/Tt - 1).

    Parameters (in order)
    ---------------------
    ref : float
        pt, fitted. [Pa]
    a1..ak : float
        Coefficients of (T/Tt - 1)^t_i. [-]

    ``ref["T_ref_K"]`` = Tt [K]; default exponents 1, 2, 3 (CO2 uses 1, 2).

    Notes
    -----
    .. math:: p = p_t\\left[1 + \\sum_i a_i \\left(\\frac{T}{T_t} - 1\\right)^{t_i}\\right]

    Linear in beta = (pt, pt a_1, ..., pt a_k).

    References
    ----------
    .. [1] R. Span, W. Wagner, J. Phys. Chem. Ref. Data 25, 1509-1596 (1996),
       doi:10.1063/1.555991, Eq. (3.10).
    """

    name = "melting-polynomial"
    default_exponents = (1.0, 2.0, 3.0)
    citation = "R. Span, W. Wagner, J. Phys. Chem. Ref. Data 25, 1509-1596 (1996), Eq. (3.10)"

    def basis(self, T, T_ref, exps):
        x = T / T_ref - 1.0
        return np.stack([power(x, t) for t in exps], axis=-1)

    def dbasis(self, T, T_ref, exps):
        x = T / T_ref - 1.0
        return np.stack([dpower(x, t) / T_ref for t in exps], axis=-1)


class MeltingSimonSum(_MeltingLinear):
    """Melting pressure as a sum of Simon terms with fixed exponents.

    Parameters (in order)
    ---------------------
    ref : float
        pt, fitted. [Pa]
    a1..ak : float
        Coefficients of (T/Tt)^t_i - 1. [-]

    ``ref["T_ref_K"]`` = Tt [K]; default exponents 1.05, 1.275 (argon, Tegeler et al. 1999);
    nitrogen uses one term with t = 1.78963 (Span et al. 2000).

    Notes
    -----
    .. math:: p = p_t\\left\\{1 + \\sum_i a_i\\left[\\left(\\frac{T}{T_t}\\right)^{t_i}
              - 1\\right]\\right\\}

    References
    ----------
    .. [1] Ch. Tegeler, R. Span, W. Wagner, "A new equation of state for argon covering the
       fluid region for temperatures from the melting line to 700 K at pressures up to
       1000 MPa", J. Phys. Chem. Ref. Data 28, 779-850 (1999), doi:10.1063/1.556037.
    .. [2] R. Span, E. W. Lemmon, R. T. Jacobsen, W. Wagner, A. Yokozeki, J. Phys. Chem. Ref.
       Data 29, 1361-1433 (2000), doi:10.1063/1.1349047.
    """

    name = "melting-simon-sum"
    default_exponents = (1.05, 1.275)
    citation = ("Ch. Tegeler, R. Span, W. Wagner, J. Phys. Chem. Ref. Data 28, 779 (1999); "
                "R. Span et al., J. Phys. Chem. Ref. Data 29, 1361 (2000)")

    def basis(self, T, T_ref, exps):
        theta = T / T_ref
        return np.stack([power(theta, t) - 1.0 for t in exps], axis=-1)

    def dbasis(self, T, T_ref, exps):
        theta = T / T_ref
        return np.stack([dpower(theta, t) / T_ref for t in exps], axis=-1)


class IapwsMelting(_MeltingLinear):
    """IAPWS R14-08 melting-pressure form of ice Ih (three terms) and ices III, V, VI (one term).

    Parameters (in order)
    ---------------------
    ref : float
        p* of the equation (the triple point it starts from), fitted. [Pa]
    a1..ak : float
        Coefficients as printed in the release. [-]

    ``ref["T_ref_K"]`` = T* [K]; ``ref["exponents"]`` the b_i (default: ice Ih's 3, 25.75,
    103.75).

    Notes
    -----
    .. math:: \\pi = 1 + \\sum_i a_i\\left(1 - \\theta^{b_i}\\right), \\qquad
              \\theta = T/T^*, \\; \\pi = p/p^*

    Ice III, V, VI are printed as pi = 1 - a (1 - theta^b): here a_1 = -a.

    References
    ----------
    .. [1] IAPWS R14-08(2011), Revised Release on the Pressure along the Melting and
       Sublimation Curves of Ordinary Water Substance.
    .. [2] W. Wagner, T. Riethmann, R. Feistel, A. H. Harvey, J. Phys. Chem. Ref. Data 40,
       043103 (2011), doi:10.1063/1.3657937 (ice Ih).
    .. [3] W. Wagner, A. Saul, A. Pruss, J. Phys. Chem. Ref. Data 23, 515-527 (1994)
       (ices III, V, VI, VII).
    """

    name = "iapws-melting"
    default_exponents = (3.0, 25.75, 103.75)
    citation = R14_CITATION

    def basis(self, T, T_ref, exps):
        theta = T / T_ref
        return np.stack([1.0 - power(theta, b) for b in exps], axis=-1)

    def dbasis(self, T, T_ref, exps):
        theta = T / T_ref
        return np.stack([-dpower(theta, b) / T_ref for b in exps], axis=-1)


class IapwsMeltingIII(IapwsMelting):
    """IAPWS R14-08 melting-pressure form of ice III: one term, b = 60 (T* = 251.165 K)."""

    name = "iapws-melting-iii"
    default_exponents = (60.0,)


class IapwsMeltingV(IapwsMelting):
    """IAPWS R14-08 melting-pressure form of ice V: one term, b = 8 (T* = 256.164 K)."""

    name = "iapws-melting-v"
    default_exponents = (8.0,)


class IapwsMeltingVI(IapwsMelting):
    """IAPWS R14-08 melting-pressure form of ice VI: one term, b = 4.6 (T* = 273.31 K)."""

    name = "iapws-melting-vi"
    default_exponents = (4.6,)


class IapwsMeltingVII(IapwsMelting):
    """IAPWS R14-08 melting-pressure form of ice VII (logarithmic).

    Parameters (in order)
    ---------------------
    ln_ref : float
        ln(p* / Pa), fitted (published p* = 2216 MPa). [-]
    a1..ak : float
        Coefficients. [-]

    ``ref["T_ref_K"]`` = T* = 355 K; default exponents -1, 5, 22.

    Notes
    -----
    .. math:: \\ln\\pi = \\sum_i a_i\\left(1 - \\theta^{b_i}\\right)

    References
    ----------
    .. [1] IAPWS R14-08(2011).
    .. [2] W. Wagner, A. Saul, A. Pruss, J. Phys. Chem. Ref. Data 23, 515-527 (1994).
    """

    name = "iapws-melting-vii"
    link = "log"
    default_exponents = (-1.0, 5.0, 22.0)


class SimonGlatzel(NonlinearForm):
    """Simon-Glatzel melting-pressure equation.

    Parameters (in order)
    ---------------------
    ref : float
        pt, fitted. [Pa]
    a : float
        [Pa]
    c : float
        Exponent, > 0. [-]

    ``ref["T_ref_K"]`` = Tt [K].

    Notes
    -----
    .. math:: p = p_t + a\\left[\\left(\\frac{T}{T_t}\\right)^c - 1\\right]

    Nonlinear in c: fitted by ``scipy.optimize.least_squares`` from a start found by
    profiling (pt, a) over a grid of c.

    References
    ----------
    .. [1] F. Simon, G. Glatzel, "Bemerkungen zur Schmelzdruckkurve", Z. Anorg. Allg. Chem.
       178, 309-316 (1929).
    """

    name = "simon-glatzel"
    quantity = "pressure"
    link = "identity"
    reference_point = "triple"
    n_fixed = 3
    citation = "F. Simon, G. Glatzel, Z. Anorg. Allg. Chem. 178, 309-316 (1929)"

    def evaluate(self, T, P, T_ref, exps):
        return P[:, :1] + P[:, 1:2] * (power(T / T_ref, P[:, 2:3]) - 1.0)

    def derivative(self, T, P, T_ref, exps):
        c = P[:, 2:3]
        return P[:, 1:2] * c * power(T / T_ref, c - 1.0) / T_ref

    def jacobian(self, T, P, T_ref, exps):
        theta = T / T_ref
        tc = power(theta, P[:, 2:3])
        return np.stack([np.ones_like(T), tc - 1.0, P[:, 1:2] * tc * np.log(theta)], axis=-1)

    def initial_params(self, T, z, w, T_ref, exps):
        """Profile (pt, a) over c on a log grid and keep the smallest chi-square.

        For a fixed c the model is linear, ``z = pt + a g`` with ``g = theta^c - 1``, so the
        weighted fit has a closed form; all 81 grid values are solved at once (centred sums:
        ``a = S_gz / S_gg``, ``pt = z_bar - a g_bar``, ``chi2 = S_zz - S_gz^2 / S_gg``). A grid
        value whose ``g`` is constant to round-off (rank 1) is skipped.
        """
        c = np.geomspace(0.05, 200.0, 81)[:, None]
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            g = (T / T_ref)[None, :] ** c - 1.0
            W = np.sum(w)
            z_bar = np.sum(w * z) / W
            g_bar = (g @ w) / W
            dg = g - g_bar[:, None]
            dz = z - z_bar
            S_gg = (dg * dg) @ w
            S_gz = dg @ (w * dz)
            a = S_gz / S_gg
            chi2 = np.sum(w * dz * dz) - S_gz * a
            usable = np.isfinite(chi2) & np.isfinite(a) & (S_gg > 1e-26 * ((g * g) @ w))
        if not np.any(usable):
            return np.array([np.min(z), np.ptp(z), 1.0])
        i = int(np.argmin(np.where(usable, chi2, np.inf)))
        return np.array([z_bar - a[i] * g_bar[i], a[i], float(c[i, 0])])

    def bounds(self, T, T_ref):
        return np.array([-np.inf, -np.inf, 1e-6]), np.array([np.inf, np.inf, 1e4])


MELTING_POLYNOMIAL = register_form(MeltingPolynomial())
MELTING_SIMON_SUM = register_form(MeltingSimonSum())
IAPWS_MELTING = register_form(IapwsMelting())
IAPWS_MELTING_III = register_form(IapwsMeltingIII())
IAPWS_MELTING_V = register_form(IapwsMeltingV())
IAPWS_MELTING_VI = register_form(IapwsMeltingVI())
IAPWS_MELTING_VII = register_form(IapwsMeltingVII())
SIMON_GLATZEL = register_form(SimonGlatzel())
