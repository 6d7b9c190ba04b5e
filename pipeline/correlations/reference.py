"""Published reference equations as :class:`Curve` objects, and the constants they rest on.

Water: IAPWS R14-08(2011) melting (ices Ih, III, V, VI, VII) and sublimation pressure; IAPWS
SR1-86(1992) saturation pressure and saturated densities. Carbon dioxide: the ancillary
equations of Span & Wagner (1996). Nitrogen: Span et al. (2000). Argon: Tegeler et al. (1999).

Coefficients are those of ``/work/shared/reference-values.md``: the water values were checked
against the ``iapws`` package; the CO2, N2 and Ar values are recalled from the publications and
cross-checked in independent public codes ("M+P"), except where a note says "memory only".
Validity ranges: water as published; the others are conservative choices explained per curve
(the published limits of those ancillaries were not available to check).

Each curve's first parameter is the published reference value (ln pc, ln pt, pt or rho_c, as the
form requires), so these curves are evaluated exactly as a fitted curve of the same form.
"""

from __future__ import annotations

import math

from pipeline.correlations.base import Curve, get_form

R14 = "IAPWS R14-08(2011), Revised Release on the Pressure along the Melting and Sublimation " \
      "Curves of Ordinary Water Substance"
SR1 = "IAPWS SR1-86(1992), Revised Supplementary Release on Saturation Properties of Ordinary " \
      "Water Substance (W. Wagner, A. Pruss, J. Phys. Chem. Ref. Data 22, 783 (1993))"
IAPWS95 = "IAPWS R6-95(2018), IAPWS-95 formulation"
SW96 = "R. Span, W. Wagner, J. Phys. Chem. Ref. Data 25, 1509 (1996)"
N2_2000 = "R. Span, E. W. Lemmon, R. T. Jacobsen, W. Wagner, A. Yokozeki, J. Phys. Chem. Ref. " \
          "Data 29, 1361 (2000)"
AR_1999 = "Ch. Tegeler, R. Span, W. Wagner, J. Phys. Chem. Ref. Data 28, 779 (1999)"
MP = " [recalled from the publication, cross-checked in independent public codes]"
M_ONLY = " [recalled from the publication only; one public code agrees]"

# ---------------------------------------------------------------------------------------------
# Constants
# ---------------------------------------------------------------------------------------------

REFERENCE_CONSTANTS: dict[str, dict] = {
    "water": {
        "Tc_K": 647.096, "pc_Pa": 22.064e6, "rhoc_kg_m3": 322.0,
        "molar_mass_kg_mol": 0.018015268, "normal_boiling_T_K": 373.1243,
        "triple_points": [
            {"phases": ["vapour", "liquid", "Ih"], "T_K": 273.16, "p_Pa": 611.657,
             "citation": R14},
            {"phases": ["Ih", "III", "liquid"], "T_K": 251.165, "p_Pa": 208.566e6,
             "citation": R14},
            {"phases": ["III", "V", "liquid"], "T_K": 256.164, "p_Pa": 350.100e6,
             "citation": R14},
            {"phases": ["V", "VI", "liquid"], "T_K": 273.31, "p_Pa": 632.400e6,
             "citation": R14},
            {"phases": ["VI", "VII", "liquid"], "T_K": 355.0, "p_Pa": 2216.0e6,
             "citation": R14},
        ],
        "citations": {
            "Tc_K": IAPWS95, "pc_Pa": IAPWS95, "rhoc_kg_m3": IAPWS95,
            "molar_mass_kg_mol": IAPWS95,
            "normal_boiling_T_K": IAPWS95 + " (saturation at 101325 Pa, computed)",
        },
    },
    "carbon-dioxide": {
        "Tc_K": 304.1282, "pc_Pa": 7.3773e6, "rhoc_kg_m3": 467.6,
        "molar_mass_kg_mol": 0.0440098, "normal_sublimation_T_K": 194.686,
        "triple_points": [
            {"phases": ["vapour", "liquid", "solid"], "T_K": 216.592, "p_Pa": 0.51795e6,
             "citation": SW96 + MP},
        ],
        "citations": {
            "Tc_K": SW96 + MP, "pc_Pa": SW96 + MP, "rhoc_kg_m3": SW96 + MP,
            "molar_mass_kg_mol": SW96 + MP,
            "normal_sublimation_T_K": SW96 + " [memory, reproduced by the sublimation equation]",
        },
    },
    "nitrogen": {
        "Tc_K": 126.192, "pc_Pa": 3.3958e6, "rhoc_kg_m3": 313.300,
        "molar_mass_kg_mol": 0.02801348, "normal_boiling_T_K": 77.355,
        "triple_points": [
            {"phases": ["vapour", "liquid", "solid"], "T_K": 63.151, "p_Pa": 12.523e3,
             "citation": N2_2000 + MP},
        ],
        "citations": {
            "Tc_K": N2_2000 + MP, "pc_Pa": N2_2000 + MP,
            "rhoc_kg_m3": N2_2000 + MP + " (11.1839 mol/dm3 converted)",
            "molar_mass_kg_mol": N2_2000 + MP,
            "normal_boiling_T_K": N2_2000 + " [memory, reproduced by the vapour-pressure "
                                            "equation]",
        },
    },
    "argon": {
        "Tc_K": 150.687, "pc_Pa": 4.863e6, "rhoc_kg_m3": 535.6,
        "molar_mass_kg_mol": 0.039948, "normal_boiling_T_K": 87.302,
        "triple_points": [
            {"phases": ["vapour", "liquid", "solid"], "T_K": 83.8058, "p_Pa": 68.891e3,
             "citation": AR_1999 + MP},
        ],
        "citations": {
            "Tc_K": AR_1999 + MP, "pc_Pa": AR_1999 + MP, "rhoc_kg_m3": AR_1999 + MP,
            "molar_mass_kg_mol": AR_1999 + MP,
            "normal_boiling_T_K": AR_1999 + " [memory, reproduced by the vapour-pressure "
                                            "equation]",
        },
    },
}
"""Critical and triple points, molar masses [kg/mol], normal boiling (or sublimation)
temperatures [K], each with its citation. SI units as the key names say."""


# ---------------------------------------------------------------------------------------------
# Curve table: (fluid, boundary, quantity, solid_phase) -> specification
# ---------------------------------------------------------------------------------------------
# Each spec: form, T_ref_K, reference value (pc, pt or rho_c in SI), coefficients, exponents,
# range, citation. The reference value becomes params[0] (its log for log-link forms).

_SPECS: dict[tuple[str, str, str, str], dict] = {
    # --- water: IAPWS SR1-86(1992), valid 273.16 K to Tc -------------------------------------
    ("water", "liquid-vapour", "pressure", ""): dict(
        form="wagner-type", T_ref=647.096, ref_value=22.064e6,
        coef=(-7.85951783, 1.84408259, -11.7866497, 22.6807411, -15.9618719, 1.80122502),
        exps=(1.0, 1.5, 3.0, 3.5, 4.0, 7.5), T_range=(273.16, 647.096), citation=SR1),
    ("water", "liquid-vapour", "rho_liquid", ""): dict(
        form="density-power", T_ref=647.096, ref_value=322.0,
        coef=(1.99274064, 1.09965342, -0.510839303, -1.75493479, -45.5170352, -6.74694450e5),
        exps=(1 / 3, 2 / 3, 5 / 3, 16 / 3, 43 / 3, 110 / 3), T_range=(273.16, 647.096),
        citation=SR1),
    ("water", "liquid-vapour", "rho_vapour", ""): dict(
        form="density-log", T_ref=647.096, ref_value=322.0,
        coef=(-2.03150240, -2.68302940, -5.38626492, -17.2991605, -44.7586581, -63.9201063),
        exps=(2 / 6, 4 / 6, 8 / 6, 18 / 6, 37 / 6, 71 / 6), T_range=(273.16, 647.096),
        citation=SR1),
    # --- water: IAPWS R14-08(2011), ranges as published -------------------------------------
    ("water", "solid-liquid", "pressure", "Ih"): dict(
        form="iapws-melting", T_ref=273.16, ref_value=611.657,
        coef=(0.119539337e7, 0.808183159e5, 0.333826860e4), exps=(3.0, 25.75, 103.75),
        T_range=(251.165, 273.16), citation=R14 + ", ice Ih"),
    ("water", "solid-liquid", "pressure", "III"): dict(
        form="iapws-melting", T_ref=251.165, ref_value=208.566e6, coef=(-0.299948,),
        exps=(60.0,), T_range=(251.165, 256.164), citation=R14 + ", ice III"),
    ("water", "solid-liquid", "pressure", "V"): dict(
        form="iapws-melting", T_ref=256.164, ref_value=350.100e6, coef=(-1.18721,),
        exps=(8.0,), T_range=(256.164, 273.31), citation=R14 + ", ice V"),
    ("water", "solid-liquid", "pressure", "VI"): dict(
        form="iapws-melting", T_ref=273.31, ref_value=632.400e6, coef=(-1.07476,),
        exps=(4.6,), T_range=(273.31, 355.0), citation=R14 + ", ice VI"),
    ("water", "solid-liquid", "pressure", "VII"): dict(
        form="iapws-melting-vii", T_ref=355.0, ref_value=2216.0e6,
        coef=(0.173683e1, -0.544606e-1, 0.806106e-7), exps=(-1.0, 5.0, 22.0),
        T_range=(355.0, 715.0), citation=R14 + ", ice VII"),
    ("water", "solid-vapour", "pressure", "Ih"): dict(
        form="iapws-sublimation", T_ref=273.16, ref_value=611.657,
        coef=(-0.212144006e2, 0.273203819e2, -0.610598130e1),
        exps=(0.333333333e-2, 0.120666667e1, 0.170333333e1), T_range=(50.0, 273.16),
        citation=R14 + ", sublimation of ice Ih"),
    # --- carbon dioxide: Span & Wagner (1996) ancillary equations ---------------------------
    # Vapour pressure and densities: triple point to Tc (the natural range of an ancillary;
    # the printed limits were not rechecked).
    ("carbon-dioxide", "liquid-vapour", "pressure", ""): dict(
        form="wagner-type", T_ref=304.1282, ref_value=7.3773e6,
        coef=(-7.0602087, 1.9391218, -1.6463597, -3.2995634), exps=(1.0, 1.5, 2.0, 4.0),
        T_range=(216.592, 304.1282), citation=SW96 + ", Eq. (3.13)" + MP),
    ("carbon-dioxide", "liquid-vapour", "rho_liquid", ""): dict(
        form="density-log", T_ref=304.1282, ref_value=467.6,
        coef=(1.9245108, -0.62385555, -0.32731127, 0.39245142),
        exps=(0.34, 0.5, 10 / 6, 11 / 6), T_range=(216.592, 304.1282),
        citation=SW96 + ", Eq. (3.14)" + MP),
    ("carbon-dioxide", "liquid-vapour", "rho_vapour", ""): dict(
        form="density-log", T_ref=304.1282, ref_value=467.6,
        coef=(-1.7074879, -0.82274670, -4.6008549, -10.111178, -29.742252),
        exps=(0.34, 0.5, 1.0, 7 / 3, 14 / 3), T_range=(216.592, 304.1282),
        citation=SW96 + ", Eq. (3.15)" + MP),
    # Melting: published for T >= Tt; the upper limit is not known reliably (memory), so the
    # range stops at 250 K, the highest temperature with an independent check value.
    ("carbon-dioxide", "solid-liquid", "pressure", ""): dict(
        form="melting-polynomial", T_ref=216.592, ref_value=0.51795e6,
        coef=(1955.5390, 2055.4593), exps=(1.0, 2.0), T_range=(216.592, 250.0),
        citation=SW96 + ", Eq. (3.10)" + MP),
    # Sublimation: published for T <= Tt; lower limit 150 K chosen conservatively (memory only).
    ("carbon-dioxide", "solid-vapour", "pressure", ""): dict(
        form="sublimation-power", T_ref=216.592, ref_value=0.51795e6,
        coef=(-14.740846, 2.4327015, -5.3061778), exps=(1.0, 1.9, 2.9),
        T_range=(150.0, 216.592), citation=SW96 + ", Eq. (3.12)" + MP),
    # --- nitrogen: Span et al. (2000) ancillaries -------------------------------------------
    ("nitrogen", "liquid-vapour", "pressure", ""): dict(
        form="wagner-2.5-5", T_ref=126.192, ref_value=3.3958e6,
        coef=(-6.12445284, 1.26327220, -0.765910082, -1.77570564), exps=(1.0, 1.5, 2.5, 5.0),
        T_range=(63.151, 126.192), citation=N2_2000 + MP),
    ("nitrogen", "liquid-vapour", "rho_liquid", ""): dict(
        form="density-log", T_ref=126.192, ref_value=313.300,
        coef=(1.48654237, -0.280476066, 0.0894143085, -0.119879866),
        exps=(0.3294, 2 / 3, 8 / 3, 35 / 6), T_range=(63.151, 126.192),
        citation=N2_2000 + MP),
    # The Tc/T factor was settled by computation (physical densities), not by a source.
    ("nitrogen", "liquid-vapour", "rho_vapour", ""): dict(
        form="density-log-tc", T_ref=126.192, ref_value=313.300,
        coef=(-1.70127164, -3.70402649, 1.29859383, -0.561424977, -2.68505381),
        exps=(0.34, 5 / 6, 7 / 6, 13 / 6, 14 / 3), T_range=(63.151, 126.192),
        citation=N2_2000 + M_ONLY),
    # Melting (memory only): range stops at 300 K, the highest check value.
    ("nitrogen", "solid-liquid", "pressure", ""): dict(
        form="melting-simon-sum", T_ref=63.151, ref_value=12.523e3, coef=(12798.61,),
        exps=(1.78963,), T_range=(63.151, 300.0), citation=N2_2000 + M_ONLY),
    # Sublimation (memory only): one-term equation, kept to 50 K .. Tt (lowest check value).
    ("nitrogen", "solid-vapour", "pressure", ""): dict(
        form="sublimation-power", T_ref=63.151, ref_value=12.523e3, coef=(-13.088692,),
        exps=(1.0,), T_range=(50.0, 63.151), citation=N2_2000 + M_ONLY),
    # --- argon: Tegeler et al. (1999) ancillaries -------------------------------------------
    ("argon", "liquid-vapour", "pressure", ""): dict(
        form="wagner-type", T_ref=150.687, ref_value=4.863e6,
        coef=(-5.9409785, 1.3553888, -0.46497607, -1.5399043), exps=(1.0, 1.5, 2.0, 4.5),
        T_range=(83.8058, 150.687), citation=AR_1999 + MP),
    ("argon", "liquid-vapour", "rho_liquid", ""): dict(
        form="density-log", T_ref=150.687, ref_value=535.6,
        coef=(1.5004264, -0.3138129, 0.086461622, -0.041477525),
        exps=(0.334, 2 / 3, 7 / 3, 4.0), T_range=(83.8058, 150.687), citation=AR_1999 + MP),
    # Coefficients memory only; the Tc/T factor settled by computation.
    ("argon", "liquid-vapour", "rho_vapour", ""): dict(
        form="density-log-tc", T_ref=150.687, ref_value=535.6,
        coef=(-1.70695656, -4.02739448, 1.55177558, -2.30683228),
        exps=(0.345, 5 / 6, 1.0, 13 / 3), T_range=(83.8058, 150.687),
        citation=AR_1999 + M_ONLY),
    # Melting: range stops at 300 K (highest check value; published limit not rechecked).
    ("argon", "solid-liquid", "pressure", ""): dict(
        form="melting-simon-sum", T_ref=83.8058, ref_value=68.891e3,
        coef=(-7476.2665, 9959.0613), exps=(1.05, 1.275), T_range=(83.8058, 300.0),
        citation=AR_1999 + MP),
    # Sublimation: lower limit 70 K (lowest check value; published limit not rechecked).
    ("argon", "solid-vapour", "pressure", ""): dict(
        form="sublimation-power", T_ref=83.8058, ref_value=68.891e3,
        coef=(-11.391604, -0.39513431), exps=(1.0, 2.7), T_range=(70.0, 83.8058),
        citation=AR_1999 + MP),
}


def _build(spec: dict) -> Curve:
    form = get_form(spec["form"])
    first = math.log(spec["ref_value"]) if form.link == "log" else spec["ref_value"]
    return Curve(form=spec["form"], params=(first,) + tuple(spec["coef"]),
                 ref={"T_ref_K": spec["T_ref"], "exponents": spec["exps"]},
                 covariance=None, T_min_K=spec["T_range"][0], T_max_K=spec["T_range"][1],
                 citation=spec["citation"])


REFERENCE_CURVES: dict[tuple[str, str, str, str], Curve] = {
    key: _build(spec) for key, spec in _SPECS.items()}
"""All published curves by (fluid_id, boundary, quantity, solid_phase)."""


#: CAS Registry Number -> the key of REFERENCE_CONSTANTS: reference equations are found by a
#: fluid's identity, whatever slug a store gives it ("h2o", "r718", "water").
REFERENCE_CAS = {"7732-18-5": "water", "124-38-9": "carbon-dioxide", "7727-37-9": "nitrogen",
                 "7440-37-1": "argon"}


def reference_fluid(cas_rn: str | None) -> str | None:
    """The reference-equation key of the fluid with CAS number ``cas_rn``, or None."""
    return REFERENCE_CAS.get((cas_rn or "").strip())


def reference_curve(fluid_id: str, boundary: str, quantity: str, solid_phase: str = "") -> Curve:
    """Return the published curve for a fluid, boundary, quantity and solid phase.

    Parameters
    ----------
    fluid_id : str
        ``"water"``, ``"carbon-dioxide"``, ``"nitrogen"`` or ``"argon"``.
    boundary : str
        ``"liquid-vapour"``, ``"solid-liquid"`` or ``"solid-vapour"``.
    quantity : str
        ``"pressure"`` [Pa], ``"rho_liquid"`` or ``"rho_vapour"`` [kg/m^3].
    solid_phase : str
        Water: ``"Ih"``, ``"III"``, ``"V"``, ``"VI"``, ``"VII"`` (sublimation: ``"Ih"``);
        other fluids ``""``.

    Returns
    -------
    Curve
        With ``citation`` naming the publication.

    Raises
    ------
    KeyError
        For an unknown combination; the message lists the valid ones for the fluid.
    """
    key = (fluid_id, boundary, quantity, solid_phase)
    try:
        return REFERENCE_CURVES[key]
    except KeyError:
        valid = sorted(k for k in REFERENCE_CURVES if k[0] == fluid_id) or sorted(
            {k[0] for k in REFERENCE_CURVES})
        raise KeyError(f"no reference curve for {key}; valid: {valid}") from None


def triple_temperature(fluid_id: str) -> float:
    """Temperature of the vapour-liquid-solid triple point of a reference fluid. [K]"""
    return REFERENCE_CONSTANTS[fluid_id]["triple_points"][0]["T_K"]


def critical_temperature(fluid_id: str) -> float:
    """Critical temperature of a reference fluid. [K]"""
    return REFERENCE_CONSTANTS[fluid_id]["Tc_K"]
