"""Published equations the real-data corpus is sampled from (pure functions, SI units).

Each function evaluates one published form with one set of published coefficients; the
corpus builder (``build_corpus.py``) samples them inside their stated validity ranges.
Temperatures in [K], pressures in [Pa], densities in [kg/m^3].

Forms from compilations (coefficients read from the tables of the ``chemicals`` package):

- Wagner 2.5-5 form, ``ln(p/pc) = (Tc/T)(a τ + b τ^1.5 + c τ^2.5 + d τ^5)``, τ = 1 − T/Tc:
  W. Wagner, Cryogenics 13, 470 (1973); coefficients of B. E. Poling, J. M. Prausnitz,
  J. P. O'Connell, The Properties of Gases and Liquids, 5th ed. (McGraw-Hill, 2001).
- Wagner 3-6 form, ``ln(p/pc) = (Tc/T)(a τ + b τ^1.5 + c τ^3 + d τ^6)``: J. McGarry,
  Ind. Eng. Chem. Process Des. Dev. 22, 313 (1983).
- Antoine, ``log10(p/Pa) = A − B/(T/K + C)`` (Poling et al. 2001, coefficients converted to
  Pa and K by the ``chemicals`` package).

Ancillary equations of reference equations of state (coefficients as transcribed in
/work/shared/reference-values.md, sections 2-4):

- carbon dioxide: R. Span, W. Wagner, J. Phys. Chem. Ref. Data 25, 1509 (1996), eqs. 3.10-3.15;
- nitrogen: R. Span, E. W. Lemmon, R. T Jacobsen, W. Wagner, A. Yokozeki,
  J. Phys. Chem. Ref. Data 29, 1361 (2000);
- argon: Ch. Tegeler, R. Span, W. Wagner, J. Phys. Chem. Ref. Data 28, 779 (1999).

Water and heavy water are evaluated with the ``iapws`` package (IAPWS SR1-86(1992),
IAPWS R14-08(2011), IAPWS R10-06(2009); heavy water: the ancillary, melting and sublimation
equations of the IAPWS 2017 heavy-water formulation as the package implements them).
"""

from __future__ import annotations

import math

import numpy as np

MPA = 1e6


def wagner_25_5(T, Tc, pc, a, b, c, d):
    """Vapour pressure [Pa] from the Wagner 2.5-5 form (Wagner 1973; Poling et al. 2001)."""
    T = np.asarray(T, dtype=float)
    tau = 1.0 - T / Tc
    return pc * np.exp((a * tau + b * tau**1.5 + c * tau**2.5 + d * tau**5) * Tc / T)


def wagner_3_6(T, Tc, pc, a, b, c, d):
    """Vapour pressure [Pa] from the Wagner 3-6 form of McGarry (1983)."""
    T = np.asarray(T, dtype=float)
    tau = 1.0 - T / Tc
    return pc * np.exp((a * tau + b * tau**1.5 + c * tau**3 + d * tau**6) * Tc / T)


def antoine_pa_k(T, A, B, C):
    """Vapour pressure [Pa] from ``log10(p/Pa) = A − B/(T + C)`` with T in [K]."""
    T = np.asarray(T, dtype=float)
    return 10.0 ** (A - B / (T + C))


def _sum(theta, coefs, exps):
    return sum(a * theta**t for a, t in zip(coefs, exps))


# name -> constants and ancillary coefficients (reference-values.md sections 2.1-4)
ANCILLARY = {
    "co2": dict(
        Tc=304.1282, pc=7.3773e6, rhoc=467.6, Tt=216.592, pt=0.51795e6,
        vp=((-7.0602087, 1.9391218, -1.6463597, -3.2995634), (1.0, 1.5, 2.0, 4.0)),
        rho_l=((1.9245108, -0.62385555, -0.32731127, 0.39245142), (0.34, 0.5, 10 / 6, 11 / 6), False),
        rho_v=((-1.7074879, -0.82274670, -4.6008549, -10.111178, -29.742252),
               (0.340, 0.5, 1.0, 7 / 3, 14 / 3), False),
    ),
    "n2": dict(
        Tc=126.192, pc=3.3958e6, rhoc=313.300, Tt=63.151, pt=12.523e3,
        vp=((-6.12445284, 1.26327220, -0.765910082, -1.77570564), (1.0, 1.5, 2.5, 5.0)),
        rho_l=((1.48654237, -0.280476066, 0.0894143085, -0.119879866),
               (0.3294, 2 / 3, 8 / 3, 35 / 6), False),
        rho_v=((-1.70127164, -3.70402649, 1.29859383, -0.561424977, -2.68505381),
               (0.34, 5 / 6, 7 / 6, 13 / 6, 14 / 3), True),
    ),
    "ar": dict(
        Tc=150.687, pc=4.863e6, rhoc=535.6, Tt=83.8058, pt=68.891e3,
        vp=((-5.9409785, 1.3553888, -0.46497607, -1.5399043), (1.0, 1.5, 2.0, 4.5)),
        rho_l=((1.5004264, -0.3138129, 0.086461622, -0.041477525), (0.334, 2 / 3, 7 / 3, 4.0), False),
        rho_v=((-1.70695656, -4.02739448, 1.55177558, -2.30683228), (0.345, 5 / 6, 1.0, 13 / 3), True),
    ),
}


def ancillary_vapour_pressure(name: str, T):
    """Vapour pressure [Pa]: ``ln(p/pc) = (Tc/T) Σ a_i θ^t_i``, θ = 1 − T/Tc."""
    c = ANCILLARY[name]
    T = np.asarray(T, dtype=float)
    theta = 1.0 - T / c["Tc"]
    return c["pc"] * np.exp(c["Tc"] / T * _sum(theta, *c["vp"]))


def ancillary_density(name: str, phase: str, T):
    """Saturated liquid or vapour density [kg/m^3]: ``ln(ρ/ρc) = [Tc/T] Σ a_i θ^t_i``."""
    c = ANCILLARY[name]
    coefs, exps, tc_over_t = c["rho_l" if phase == "liquid" else "rho_v"]
    T = np.asarray(T, dtype=float)
    theta = 1.0 - T / c["Tc"]
    factor = c["Tc"] / T if tc_over_t else 1.0
    return c["rhoc"] * np.exp(factor * _sum(theta, coefs, exps))


def ancillary_melting(name: str, T):
    """Melting pressure [Pa] of the three ancillary melting equations (forms differ)."""
    c = ANCILLARY[name]
    T = np.asarray(T, dtype=float)
    x = T / c["Tt"]
    if name == "co2":      # Span & Wagner (1996) eq. 3.10
        ratio = 1 + 1955.5390 * (x - 1) + 2055.4593 * (x - 1) ** 2
    elif name == "n2":     # Span et al. (2000)
        ratio = 1 + 12798.61 * (x**1.78963 - 1)
    else:                  # Tegeler et al. (1999)
        ratio = 1 - 7476.2665 * (x**1.05 - 1) + 9959.0613 * (x**1.275 - 1)
    return c["pt"] * ratio


def ancillary_sublimation(name: str, T):
    """Sublimation pressure [Pa]: ``ln(p/pt) = (Tt/T) Σ a_i (1 − T/Tt)^t_i``."""
    c = ANCILLARY[name]
    terms = {"co2": ((-14.740846, 2.4327015, -5.3061778), (1.0, 1.9, 2.9)),
             "n2": ((-13.088692,), (1.0,)),
             "ar": ((-11.391604, -0.39513431), (1.0, 2.7))}[name]
    T = np.asarray(T, dtype=float)
    return c["pt"] * np.exp(c["Tt"] / T * _sum(1.0 - T / c["Tt"], *terms))


# --- water and heavy water through the iapws package -------------------------------------

#: IAPWS R14-08(2011) Table 1: triple points of liquid water with vapour and the ices
#: (T [K], p [Pa]); the reference points of its melting equations.
H2O_TRIPLE = {("vapour", "liquid", "Ih"): (273.16, 611.657),
              ("Ih", "III", "liquid"): (251.165, 208.566e6),
              ("III", "V", "liquid"): (256.164, 350.100e6),
              ("V", "VI", "liquid"): (273.31, 632.400e6),
              ("VI", "VII", "liquid"): (355.0, 2216e6)}
#: melting curve of each ice: (T_low, T_high) [K], the validity range of its R14-08 equation
H2O_MELTING_RANGE = {"Ih": (251.165, 273.16), "III": (251.165, 256.164), "V": (256.164, 273.31),
                     "VI": (273.31, 355.0), "VII": (355.0, 715.0)}
#: heavy water: triple points and melting ranges of the equations iapws implements
#: (_D2O_Melting_Pressure: reference points 276.969 K/661.59 Pa, 254.415 K/222.41 MPa,
#: 258.661 K/352.19 MPa, 275.748 K/634.53 MPa)
D2O_TRIPLE = {("vapour", "liquid", "Ih"): (276.969, 661.59),
              ("Ih", "III", "liquid"): (254.415, 222.41e6),
              ("III", "V", "liquid"): (258.661, 352.19e6),
              ("V", "VI", "liquid"): (275.748, 634.53e6)}
D2O_MELTING_RANGE = {"Ih": (254.415, 276.969), "III": (254.415, 258.661), "V": (258.661, 275.748),
                     "VI": (275.748, 315.0)}


def h2o_saturation(T):
    """(p [Pa], ρ' , ρ'' [kg/m^3]) from the IAPWS SR1-86(1992) auxiliary equations."""
    from iapws.iapws95 import IAPWS95
    T = np.asarray(T, dtype=float)
    return (np.array([IAPWS95._Vapor_Pressure(t) * MPA for t in T]),
            np.array([IAPWS95._Liquid_Density(t) for t in T]),
            np.array([IAPWS95._Vapor_Density(t) for t in T]))


def d2o_saturation(T):
    """(p [Pa], ρ', ρ'' [kg/m^3]) from the heavy-water ancillary equations (iapws D2O)."""
    from iapws.iapws95 import D2O
    T = np.asarray(T, dtype=float)
    return (np.array([D2O._Vapor_Pressure(t) * MPA for t in T]),
            np.array([D2O._Liquid_Density(t) for t in T]),
            np.array([D2O._Vapor_Density(t) for t in T]))


def h2o_melting(T, ice: str):
    """Melting pressure [Pa] of ice ``ice`` (IAPWS R14-08(2011))."""
    from iapws._iapws import _Melting_Pressure
    return np.array([_Melting_Pressure(float(t), ice) * MPA for t in np.atleast_1d(T)])


def h2o_sublimation(T):
    """Sublimation pressure [Pa] of ice Ih (IAPWS R14-08(2011))."""
    from iapws._iapws import _Sublimation_Pressure
    return np.array([_Sublimation_Pressure(float(t)) * MPA for t in np.atleast_1d(T)])


def d2o_melting(T, ice: str):
    """Melting pressure [Pa] of heavy-water ice ``ice`` (iapws _D2O_Melting_Pressure)."""
    from iapws._iapws import _D2O_Melting_Pressure
    return np.array([_D2O_Melting_Pressure(float(t), ice) * MPA for t in np.atleast_1d(T)])


def d2o_sublimation(T):
    """Sublimation pressure [Pa] of heavy-water ice Ih (iapws _D2O_Sublimation_Pressure)."""
    from iapws._iapws import _D2O_Sublimation_Pressure
    return np.array([_D2O_Sublimation_Pressure(float(t)) * MPA for t in np.atleast_1d(T)])


def ice_ih_density(T: float, p: float) -> float:
    """Density [kg/m^3] of ice Ih at (T [K], p [Pa]) from IAPWS R10-06(2009)."""
    from iapws._iapws import _Ice
    return float(_Ice(T, p / MPA)["rho"])


def positional(x: float, digits: int) -> str:
    """``x`` rounded to ``digits`` significant digits, written without an exponent."""
    if x == 0 or not math.isfinite(x):
        return repr(float(x))
    return np.format_float_positional(float(x), precision=digits, unique=False, fractional=False,
                                      trim="-")
