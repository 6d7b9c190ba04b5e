"""SQL macros that evaluate curated curves with plain SQL (no Python UDFs).

Every correlation form of :data:`pipeline.correlations.FORMS` gets an SQL expression generated
from its definition: a *linear* form is ``link(P0, sum_i a_i phi_i(T))`` with the basis phi_i of
its family (:data:`BASIS_SQL`, looked up along the class hierarchy) and the link of the form
(``exp(P0 + S)`` for the log link, ``P0 (1 + S)`` for the identity link), exactly as
:meth:`pipeline.correlations.LinearForm.evaluate` computes it; the three nonlinear forms have
their equation written out (:data:`NONLINEAR_SQL`). A form without an SQL expression is an
error at publish time, so a new form cannot be released without one.

Coefficients live in ``curated_curves`` (``params``, ``exponents`` as DOUBLE lists, 1-based in
SQL); the sum is unrolled over :data:`MAX_TERMS` terms, those beyond the curve's exponents
contributing 0 without being evaluated. Macros persist in the DuckDB file and work from the
plain ``duckdb`` client; their parameter names never equal a column name of
``curated_curves`` (DuckDB would refuse the binding), and every name inside them (table
aliases, CTEs, their columns) starts with ``fl__`` (reserved: do not give your own tables or
aliases such names) so that an argument expression such as ``c.fluid_id`` is never captured
by a name of the macro body.

The saturation temperature mirrors :meth:`pipeline.correlations.Curve.inverse`: the form is
evaluated in its fit space on the same 129-point grid, the first sign change is bracketed, and
60 bisection steps follow, in a recursive CTE.

Macros (all NULL outside the curve's validity range or when no curve exists):

``fl_vapour_pressure(fluid, temperature_K)`` [Pa]; ``fl_saturation_temperature(fluid,
pressure_Pa)`` [K]; ``fl_melting_pressure(fluid, temperature_K, phase := '')`` [Pa];
``fl_sublimation_pressure(fluid, temperature_K, phase := '')`` [Pa];
``fl_saturated_liquid_density(fluid, temperature_K)`` and
``fl_saturated_vapour_density(fluid, temperature_K)`` [kg/m^3];
``fl_curve_value(fluid, boundary, phase, quantity, temperature_K)`` and
``fl_curve_inverse(fluid, boundary, phase, quantity, value)`` for any curve;
``fl_form_value(form, params, exponents, T_ref_K, temperature_K)`` for raw coefficients.

Table macros for bulk evaluation (:func:`table_macro_statements`): ``fl_curve_value_table(points,
boundary, phase, quantity)`` and ``fl_vapour_pressure_table(points)``,
``fl_melting_pressure_table(points, phase := '')`` and the like, over a table or view of
(fluid_id, temperature_K) rows.
"""

from __future__ import annotations

import re

import duckdb

from pipeline.correlations import FORMS, CorrelationForm, LinearForm
from pipeline.correlations.base import TauPowerBasis
from pipeline.correlations.melting import (IapwsMelting, MeltingPolynomial, MeltingSimonSum,
                                           SimonGlatzel)
from pipeline.correlations.sublimation import IapwsSublimation
from pipeline.correlations.vapour_pressure import Antoine, AntoineExtended
from pipeline.errors import PublishError

MAX_TERMS = 8
"""Sum terms unrolled in SQL; a curve with more is refused at publish time."""

GRID_POINTS = 129     # as Curve.inverse(n_grid=129)
BISECTION_STEPS = 60  # as pipeline.correlations.base.bracketed_inverse(n_iter=60)
RANGE_RTOL = 1e-12    # as pipeline.correlations.base._RANGE_RTOL

# Names used inside the expressions: P = params, E = exponents, R = T_ref_K, X = temperature_K
_P, _E, _R, _X = "p_list", "e_list", "t_ref", "t_k"

# basis phi_i(T) with {e} the i-th exponent, per family of linear forms (class -> template)
BASIS_SQL: dict[type, str] = {
    MeltingPolynomial: "pow({x} / {r} - 1, {e})",
    MeltingSimonSum: "(pow({x} / {r}, {e}) - 1)",
    IapwsMelting: "(1 - pow({x} / {r}, {e}))",
    IapwsSublimation: "pow({x} / {r}, {e} - 1)",
}
_TAU_PREFACTOR = "({r} / {x}) * pow(1 - {x} / {r}, {e})"
_TAU_PLAIN = "pow(1 - {x} / {r}, {e})"

# nonlinear forms: the whole equation ({p1}.. are parameters, {e1} the first exponent)
NONLINEAR_SQL: dict[type, str] = {
    AntoineExtended: "exp({p1} - {p2} / ({x} + {p3}) + {p4} * ln({x}) + {p5} * pow({x}, {e1}))",
    Antoine: "exp({p1} - {p2} / ({x} + {p3}))",
    SimonGlatzel: "({p1} + {p2} * (pow({x} / {r}, {p3}) - 1))",
}

NONLINEAR_PARAM_NAMES: dict[type, tuple[str, ...]] = {
    AntoineExtended: ("A", "B_K", "C_K", "D", "E"),
    Antoine: ("A", "B_K", "C_K"),
    SimonGlatzel: ("ref_Pa", "a_Pa", "c"),
}

_IDENT = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*\Z")


def ident(name: str) -> str:
    """An SQL identifier from code (table, view, column, macro name), validated."""
    if not _IDENT.match(name):
        raise ValueError(f"not a plain SQL identifier: {name!r}")
    return name


def text_literal(text: str) -> str:
    """A quoted SQL string literal for fixed documentation text (COMMENT ON takes no parameters)."""
    return "'" + str(text).replace("'", "''") + "'"


def param_names(form: CorrelationForm, n_params: int) -> tuple[str, ...]:
    """Names of a curve's parameters, in order (the SQL list positions 1..n)."""
    if isinstance(form, LinearForm):
        first = "ln_ref" if form.link == "log" else "ref"
        return (first,) + tuple(f"a{i}" for i in range(1, n_params))
    for cls in type(form).__mro__:
        if cls in NONLINEAR_PARAM_NAMES:
            return NONLINEAR_PARAM_NAMES[cls][:n_params]
    return tuple(f"p{i}" for i in range(1, n_params + 1))


def _basis_template(form: CorrelationForm) -> str:
    if isinstance(form, TauPowerBasis):
        return _TAU_PREFACTOR if form.prefactor else _TAU_PLAIN
    for cls in type(form).__mro__:
        if cls in BASIS_SQL:
            return BASIS_SQL[cls]
    raise PublishError(f"correlation form {form.name!r} has no SQL basis expression; add its "
                       "family to pipeline.publish.sqlmacros.BASIS_SQL")


def _list_names() -> dict:
    """How the expressions of :func:`form_sql` name parameter i, exponent i and "term i exists"
    when the coefficients come as DOUBLE lists (``fl_form_value``)."""
    return {"p": lambda i: f"{_P}[{i}]", "e": lambda i: f"{_E}[{i}]",
            "has": lambda i: f"len({_E}) > {i}"}


def _scalar_names() -> dict:
    """The same names when the coefficients come as scalar columns ``fl__p1..``, ``fl__e1..``
    (the table macros: a join carries scalars much cheaper than lists)."""
    return {"p": lambda i: f"fl__p{i}", "e": lambda i: f"fl__e{i}",
            "has": lambda i: f"fl__e{i + 1} IS NOT NULL"}


def form_sql(form: CorrelationForm, names: dict | None = None) -> str:
    """SQL expression of ``form`` in its parameters, exponents, t_ref and t_k (the macro's
    parameters): by default the lists p_list and e_list, or the scalars of ``names``."""
    nm = names or _list_names()
    p, e, has = nm["p"], nm["e"], nm["has"]
    fmt = {"x": _X, "r": _R}
    if isinstance(form, LinearForm):
        basis = _basis_template(form)
        # term i exists when the curve has more than i exponents (a linear form has one per
        # coefficient after the first, and at least one); absent terms are 0 without
        # evaluating them (a power per absent term made the macro several times slower)
        terms = " + ".join(
            ("" if i == 0 else f"CASE WHEN {has(i)} THEN ")
            + f"{p(i + 2)} * " + basis.format(e=e(i + 1), **fmt)
            + ("" if i == 0 else " ELSE 0 END")
            for i in range(MAX_TERMS))
        if form.link == "log":
            return f"exp({p(1)} + ({terms}))"
        return f"({p(1)} * (1 + ({terms})))"
    for cls in type(form).__mro__:
        if cls in NONLINEAR_SQL:
            params = {f"p{i}": p(i) for i in range(1, 6)}
            return NONLINEAR_SQL[cls].format(e1=e(1), **params, **fmt)
    raise PublishError(f"correlation form {form.name!r} has no SQL expression; add it to "
                       "pipeline.publish.sqlmacros.NONLINEAR_SQL")


def _branches(names: dict | None = None) -> list[tuple[str, list[str]]]:
    """(SQL expression, form names) per branch of the form CASE: forms with one expression
    share a branch; the branch shared by most forms first (a row is tested against fewer)."""
    by_sql: dict[str, list[str]] = {}
    for name in sorted(FORMS):
        by_sql.setdefault(form_sql(FORMS[name], names), []).append(name)
    return sorted(by_sql.items(), key=lambda item: (-len(item[1]), item[1][0]))


def _form_case(names: dict | None = None) -> str:
    """A CASE over every registered form, on the form's name."""
    branches = "\n    ".join(
        "WHEN form_name IN (" + ", ".join(text_literal(n) for n in names) + f") THEN {sql}"
        for sql, names in _branches(names))
    return f"CASE\n    {branches}\n    END"


def _branch_number(form: str) -> str:
    """The number (1..) of the form's branch in :func:`_branches`, from its name."""
    whens = " ".join("WHEN " + form + " IN (" + ", ".join(text_literal(n) for n in names)
                     + f") THEN {k}" for k, (_, names) in enumerate(_branches(), start=1))
    return f"CASE {whens} END"


def form_value_macro() -> str:
    """``fl_form_value``: the form CASE in list parameters."""
    return (f"CREATE OR REPLACE MACRO fl_form_value(form_name, {_P}, {_E}, {_R}, {_X}) AS "
            + _form_case())


_SCALARS = tuple(f"fl__p{i}" for i in range(1, MAX_TERMS + 2)) + tuple(
    f"fl__e{i}" for i in range(1, MAX_TERMS + 1))


def form_terms_macro() -> str:
    """``fl__form_value_terms``: the same expressions in scalar parameters, chosen by branch
    number (:func:`_branch_number`, computed once per curve rather than comparing the form's
    name on every row); the table macros use it. The arithmetic is the same, so are the
    values."""
    whens = "\n    ".join(f"WHEN {k} THEN {sql}"
                          for k, (sql, _) in enumerate(_branches(_scalar_names()), start=1))
    return (f"CREATE OR REPLACE MACRO fl__form_value_terms(fl__branch, {', '.join(_SCALARS)}, "
            f"{_R}, {_X}) AS CASE fl__branch\n    {whens}\n    END")


def _in_range(t: str) -> str:
    return (f"{t} >= fl__c.T_min_K - {RANGE_RTOL!r} * abs(fl__c.T_min_K) AND "
            f"{t} <= fl__c.T_max_K + {RANGE_RTOL!r} * abs(fl__c.T_max_K)")


_CURVE = ("FROM curated_curves fl__c WHERE fl__c.fluid_id = fluid AND fl__c.boundary = bnd "
          "AND fl__c.solid_phase = phase AND fl__c.quantity = qty")
_FIT_SPACE = "CASE WHEN fl__c.link = 'log' THEN (CASE WHEN {v} > 0 THEN ln({v}) END) ELSE {v} END"


def _g(t: str) -> str:
    """Fit-space value of the curve c at temperature expression t (extrapolated)."""
    v = f"fl_form_value(fl__c.form, fl__c.params, fl__c.exponents, fl__c.T_ref_K, {t})"
    return _FIT_SPACE.format(v=v)


def macro_statements() -> list[tuple[str, str, str]]:
    """(name, CREATE statement, comment) of every macro, in dependency order."""
    last = GRID_POINTS - 1
    curve_value = (
        "CREATE OR REPLACE MACRO fl_curve_value(fluid, bnd, phase, qty, temperature_K) AS ("
        f"SELECT CASE WHEN {_in_range('temperature_K')} THEN fl_form_value(fl__c.form, fl__c.params, "
        f"fl__c.exponents, fl__c.T_ref_K, temperature_K) END {_CURVE})")
    target = _FIT_SPACE.format(v="target_value")
    curve_inverse = f"""CREATE OR REPLACE MACRO fl_curve_inverse(fluid, bnd, phase, qty, target_value) AS (
  WITH RECURSIVE
  fl__cc AS (SELECT fl__c.* {_CURVE}),
  fl__grid AS (
    SELECT fl__k, CASE WHEN fl__k = {last} THEN fl__c.T_max_K
                 ELSE fl__k * ((fl__c.T_max_K - fl__c.T_min_K) / {last}) + fl__c.T_min_K END AS fl__t
    FROM fl__cc fl__c, range({GRID_POINTS}) fl__r(fl__k)),
  fl__gd AS (SELECT fl__k, fl__t, {_g('fl__t')} - ({target}) AS fl__d FROM fl__grid, fl__cc fl__c),
  fl__bracket AS (
    SELECT arg_min(fl__a.fl__t, fl__a.fl__k) AS fl__lo, arg_min(fl__b.fl__t, fl__a.fl__k) AS fl__hi,
           arg_min(fl__a.fl__d, fl__a.fl__k) AS fl__dlo
    FROM fl__gd fl__a JOIN fl__gd fl__b ON fl__b.fl__k = fl__a.fl__k + 1
    WHERE fl__a.fl__d * fl__b.fl__d <= 0 AND isfinite(fl__a.fl__d) AND isfinite(fl__b.fl__d)),
  fl__bisect(fl__step, fl__lo, fl__hi, fl__dlo) AS (
    SELECT 0, fl__lo, fl__hi, fl__dlo FROM fl__bracket
    UNION ALL
    SELECT fl__step + 1,
           CASE WHEN fl__dlo * fl__dmid <= 0 THEN fl__lo ELSE fl__mid END,
           CASE WHEN fl__dlo * fl__dmid <= 0 THEN fl__mid ELSE fl__hi END,
           CASE WHEN fl__dlo * fl__dmid <= 0 THEN fl__dlo ELSE fl__dmid END
    FROM (SELECT fl__step, fl__lo, fl__hi, fl__dlo, 0.5 * (fl__lo + fl__hi) AS fl__mid,
                 {_g('0.5 * (fl__lo + fl__hi)')} - ({target}) AS fl__dmid
          FROM fl__bisect, fl__cc fl__c WHERE fl__step < {BISECTION_STEPS}))
  SELECT 0.5 * (fl__lo + fl__hi) FROM fl__bisect WHERE fl__step = {BISECTION_STEPS})"""
    named = [
        ("fl_vapour_pressure", "fluid, temperature_K",
         "fl_curve_value(fluid, 'liquid-vapour', '', 'pressure', temperature_K)",
         "Vapour pressure [Pa] of a fluid at temperature_K [K] from the curated liquid-vapour "
         "curve; NULL outside its validity range."),
        ("fl_saturation_temperature", "fluid, pressure_Pa",
         "fl_curve_inverse(fluid, 'liquid-vapour', '', 'pressure', pressure_Pa)",
         "Saturation temperature [K] of a fluid at pressure_Pa [Pa]: the curated vapour-pressure "
         "curve inverted by grid bracketing and 60 bisection steps; NULL when the pressure is "
         "outside the curve's range."),
        ("fl_melting_pressure", "fluid, temperature_K, phase := ''",
         "fl_curve_value(fluid, 'solid-liquid', phase, 'pressure', temperature_K)",
         "Melting pressure [Pa] at temperature_K [K] of the solid phase (polymorph label such "
         "as Ih, III; empty for a fluid with one solid); NULL outside the validity range."),
        ("fl_sublimation_pressure", "fluid, temperature_K, phase := ''",
         "fl_curve_value(fluid, 'solid-vapour', phase, 'pressure', temperature_K)",
         "Sublimation pressure [Pa] at temperature_K [K] of the solid phase (empty for a fluid "
         "with one solid); NULL outside the validity range."),
        ("fl_saturated_liquid_density", "fluid, temperature_K",
         "fl_curve_value(fluid, 'liquid-vapour', '', 'rho_liquid', temperature_K)",
         "Saturated liquid density [kg/m^3] at temperature_K [K]; NULL outside the validity range."),
        ("fl_saturated_vapour_density", "fluid, temperature_K",
         "fl_curve_value(fluid, 'liquid-vapour', '', 'rho_vapour', temperature_K)",
         "Saturated vapour density [kg/m^3] at temperature_K [K]; NULL outside the validity range."),
    ]
    out = [
        ("fl_form_value", form_value_macro(),
         "Value of a correlation form (curated_curves.form) with parameters, exponents and "
         "reference temperature [K] at temperature_K [K], without range limits: Pa or kg/m^3."),
        ("fl_curve_value", curve_value,
         "Value of the curated curve (fluid, boundary, solid phase, quantity) at temperature_K "
         "[K]: Pa or kg/m^3; NULL outside its validity range."),
        ("fl_curve_inverse", curve_inverse,
         "Temperature [K] at which the curated curve (fluid, boundary, solid phase, quantity) "
         "takes target_value, lowest root within the validity range; NULL when none."),
    ]
    for name, args, body, comment in named:
        out.append((name, f"CREATE OR REPLACE MACRO {ident(name)}({args}) AS {body}", comment))
    out.append(("fl__form_value_terms", form_terms_macro(),
                "Internal to the table macros: fl_form_value with the parameters and exponents "
                "as scalars (fl__p1.., fl__e1..; NULL where the curve has none)."))
    out.extend(table_macro_statements())
    return out


_TABLE_CURVE = (
    "(SELECT fl__c.fluid_id, " + _branch_number("fl__c.form") + " AS fl__branch, "
    "fl__c.T_ref_K, fl__c.T_min_K, fl__c.T_max_K, "
    + ", ".join(f"fl__c.params[{i}] AS fl__p{i}" for i in range(1, MAX_TERMS + 2)) + ", "
    + ", ".join(f"fl__c.exponents[{i}] AS fl__e{i}" for i in range(1, MAX_TERMS + 1))
    + " FROM curated_curves fl__c WHERE fl__c.boundary = bnd AND fl__c.solid_phase = phase "
    "AND fl__c.quantity = qty)")

#: Table macros: (name, arguments, curve key, output column, what it returns).
TABLE_MACROS = (
    ("fl_vapour_pressure_table", "points", "'liquid-vapour', '', 'pressure'",
     "vapour_pressure_Pa", "the vapour pressure [Pa]"),
    ("fl_melting_pressure_table", "points, phase := ''", "'solid-liquid', phase, 'pressure'",
     "melting_pressure_Pa", "the melting pressure [Pa] of the solid phase"),
    ("fl_sublimation_pressure_table", "points, phase := ''", "'solid-vapour', phase, 'pressure'",
     "sublimation_pressure_Pa", "the sublimation pressure [Pa] of the solid phase"),
    ("fl_saturated_liquid_density_table", "points", "'liquid-vapour', '', 'rho_liquid'",
     "rho_liquid_kg_m3", "the saturated liquid density [kg/m^3]"),
    ("fl_saturated_vapour_density_table", "points", "'liquid-vapour', '', 'rho_vapour'",
     "rho_vapour_kg_m3", "the saturated vapour density [kg/m^3]"),
)


def table_macro_statements() -> list[tuple[str, str, str]]:
    """Table macros for bulk evaluation: every row of a table (or view) of points with columns
    ``fluid_id`` and ``temperature_K``, joined once to the curve of its fluid.

    A scalar macro such as ``fl_vapour_pressure`` is a subquery correlated on (fluid,
    temperature), which DuckDB evaluates by a join over every distinct pair; here the curves
    are joined once by fluid and the coefficients travel as scalar columns, which measured
    about 3x faster over a million rows (``benchmarks/publish.py``). The values are the same
    (the same arithmetic; a test holds them equal)."""
    value = (f"CASE WHEN {_in_range('fl__pt.temperature_K')} THEN fl__form_value_terms("
             "fl__c.fl__branch, " + ", ".join(f"fl__c.{n}" for n in _SCALARS)
             + ", fl__c.T_ref_K, fl__pt.temperature_K) END")
    generic = (
        "CREATE OR REPLACE MACRO fl_curve_value_table(points, bnd, phase, qty) AS TABLE "
        f"SELECT fl__pt.*, {value} AS value FROM query_table(points) fl__pt "
        f"LEFT JOIN {_TABLE_CURVE} fl__c ON fl__c.fluid_id = fl__pt.fluid_id")
    out = [("fl_curve_value_table", generic,
            "Table macro: every row of the table or view named by points (columns fluid_id, "
            "temperature_K [K], any others kept) with value: the curated curve (boundary, solid "
            "phase, quantity) of its fluid at temperature_K; NULL outside the validity range.")]
    for name, args, key, column, what in TABLE_MACROS:
        body = (f"SELECT fl__v.* EXCLUDE (value), fl__v.value AS {ident(column)} FROM "
                f"fl_curve_value_table(points, {key}) fl__v")
        out.append((name, f"CREATE OR REPLACE MACRO {ident(name)}({args}) AS TABLE {body}",
                    f"Table macro: every row of the table or view named by points (columns "
                    f"fluid_id, temperature_K [K], any others kept) with {column}: {what}; NULL "
                    "outside the validity range."))
    return out


MACRO_NAMES = tuple(name for name, _, _ in macro_statements())


def check_curve_fits(n_params: int, n_exponents: int, form: str) -> None:
    """Refuse a curve with more sum terms than the SQL expressions unroll."""
    if n_exponents > MAX_TERMS or n_params > MAX_TERMS + 1:
        raise PublishError(f"curve of form {form!r} has {n_params} parameters; the SQL macros "
                           f"unroll at most {MAX_TERMS} terms (raise MAX_TERMS)")


def install_macros(con: duckdb.DuckDBPyConnection) -> None:
    """Create (or replace) every macro with its COMMENT in the database of ``con``."""
    for name, statement, comment in macro_statements():
        con.execute(statement)
        kind = "MACRO TABLE" if " AS TABLE " in statement else "MACRO"
        con.execute(f"COMMENT ON {kind} {ident(name)} IS {text_literal(comment)}")


def comment_view_columns(con: duckdb.DuckDBPyConnection,
                         views: dict[str, tuple[str, ...]]) -> None:
    """Give each column of a view the comment of the same column of its base tables."""
    for view, tables in views.items():
        rows = con.execute("SELECT column_name, first(comment ORDER BY list_position(?, "
                           "table_name)) FROM duckdb_columns() WHERE list_contains(?, table_name) "
                           "AND comment IS NOT NULL GROUP BY column_name",
                           [list(tables), list(tables)]).fetchall()
        have = {r[0] for r in con.execute("SELECT column_name FROM duckdb_columns() "
                                          "WHERE table_name = ?", [view]).fetchall()}
        for column, comment in rows:
            if column in have:
                con.execute(f"COMMENT ON COLUMN {ident(view)}.{ident(column)} IS "
                            f"{text_literal(comment)}")


CURATED_VIEWS = {"curated_constants": ("release_constant",), "curated_curves": ("release_curve",),
                 "curated_provenance": ("release_provenance",),
                 "curated_release": ("release", "release_publication")}
