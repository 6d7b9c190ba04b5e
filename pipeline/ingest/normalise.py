"""Normalise a staged CSV table: parse numbers, convert units and scales, route faults.

Everything here is set-based SQL over the staged table, the temperature-scale conversion
included (generated from the same coefficients as the numpy functions of
:mod:`pipeline.ingest.scales`, and equal to them to the last bit); unit factors come from pint
once per column
(:mod:`pipeline.ingest.units`). Each row gets either normalised values or a ``fault``
(reason code and the column at fault); the loader sends faulty rows to quarantine.

Reason codes (documented in docs/batch-contract.md):
``missing-value``, ``not-a-number``, ``non-finite``, ``non-positive-temperature``,
``non-positive-pressure``, ``non-positive-value``, ``out-of-physical-range``,
``out-of-scale-range``, ``bad-uncertainty``, ``duplicate-row``, ``bad-row-shape``.
"""

from __future__ import annotations

from dataclasses import dataclass

import duckdb
import numpy as np

from pipeline.ingest.contract import TableSpec
from pipeline.ingest.scales import get_scale, ipts68_to_its90_sql
from pipeline.ingest.units import conversion

# quantity -> (pint quantity kind, SI unit, physical upper bound in SI)
QUANTITY_KIND = {
    "pressure": ("pressure", "Pa", 1e12),
    "rho_liquid": ("density", "kg/m^3", 1e5),
    "rho_vapour": ("density", "kg/m^3", 1e5),
    "rho_solid": ("density", "kg/m^3", 1e5),
    "h_vaporization": ("enthalpy", "J/mol", 1e7),
    "h_fusion": ("enthalpy", "J/mol", 1e7),
    "h_sublimation": ("enthalpy", "J/mol", 1e7),
}
T_MAX_K = 1e5


def ident(name: str) -> str:
    """A SQL identifier, double-quoted with embedded quotes doubled (column names come from files)."""
    return '"' + name.replace('"', '""') + '"'


@dataclass(frozen=True)
class Column:
    """One mapped raw column and how its cells become SI values."""

    key: str            # role in the staged table: T, pressure, rho_liquid..., u_T, u_pressure...
    column: str         # raw CSV column
    factor: float
    offset: float
    required: bool
    positive: bool      # values must be > 0 after conversion
    upper: float        # physical bound in SI


def _plan(spec: TableSpec, molar_mass: float) -> tuple[list[Column], dict[str, dict]]:
    """Columns to parse and the per-quantity uncertainty rule (constant, relative or column)."""
    T = conversion(spec.temperature.unit, "temperature")
    cols = [Column("T", spec.temperature.column, T.factor, T.offset, True, True, T_MAX_K)]
    for q, cs in spec.value_columns().items():
        kind, _, upper = QUANTITY_KIND[q]
        ambient = None
        if cs.ambient is not None:
            ambient = conversion(cs.ambient.unit, "pressure").apply(np.array([cs.ambient.value]))[0]
        lin = conversion(cs.unit, kind, molar_mass_kg_mol=molar_mass, reference=cs.reference,
                         ambient_Pa=ambient)
        cols.append(Column(q, cs.column, lin.factor, lin.offset, q == "pressure", True, upper))
    rules: dict[str, dict] = {}
    for q, u in spec.uncertainty.items():
        kind = "temperature" if q == "temperature" else QUANTITY_KIND[q][0]
        key = "T" if q == "temperature" else q
        rule = {"coverage": u.coverage}
        if u.relative is not None:
            rule["relative"] = u.relative
        else:
            lin = conversion(u.unit, kind, molar_mass_kg_mol=molar_mass, difference=True)
            if u.value is not None:
                rule["value"] = u.value * lin.factor
            else:
                rule["column"] = f"u_{key}"
                cols.append(Column(f"u_{key}", u.column, lin.factor, 0.0, False, True, np.inf))
        rules[key] = rule
    return cols, rules


def _parse_sql(staged: str, cols: list[Column], spec: TableSpec, duplicates: str,
               by_file: bool = False) -> str:
    """Parse every mapped cell once. ``plain_<key>``: the cell is an ordinary finite number in
    the declared decimal style (no unit, no thousands separator, no underscore); ``si_<key>``:
    its value in SI (NaN/inf kept so that the fault CASE can name them); ``dup``: the row
    repeats an earlier one (its number is in the table ``duplicates``)."""
    nulls = ", ".join("'" + v.replace("'", "''") + "'" for v in spec.null_values)
    other = "." if spec.decimal == "," else ","
    keys = ["fl_file", "row_number"] if by_file else ["row_number"]
    cells, parts, derived = list(keys), list(keys), []
    for c in cols:
        # the innermost query trims each cell once; the next one parses it
        cells += [f"{ident(c.column)} AS txt_{c.key}", f"trim({ident(c.column)}) AS cell_{c.key}"]
        cell = f"cell_{c.key}"
        empty = f"(txt_{c.key} IS NULL OR {cell} = ''" + (f" OR {cell} IN ({nulls}))" if nulls
                                                          else ")")
        raw = f"TRY_CAST(replace({cell}, ',', '.') AS DOUBLE)" if spec.decimal == "," else \
            f"TRY_CAST({cell} AS DOUBLE)"
        parts += [f"txt_{c.key}", f"{cell}", f"{empty} AS empty_{c.key}",
                  f"CASE WHEN contains({cell}, '_') OR contains({cell}, '{other}') THEN NULL "
                  f"ELSE {raw} END AS num_{c.key}"]
        # computed one level up, so that a CSV column named like an alias (num_T) cannot
        # shadow it: the outer queries see only the columns made here. The pattern is
        # matched only for cells that parsed to a non-finite number (1e999 -> inf).
        derived += [f"CASE WHEN num_{c.key} IS NULL THEN false WHEN isfinite(num_{c.key}) "
                    f"THEN true ELSE coalesce(regexp_matches(cell_{c.key}, "
                    f"'^[+-]?[0-9.,]+([eE][+-]?[0-9]+)?$'), false) END AS plain_{c.key}",
                    f"num_{c.key} * {c.factor!r} + {c.offset!r} AS si_{c.key}"]
    parts.append(f"{_row_key(by_file)} IN (SELECT row_key FROM {duplicates}) AS dup")
    cell_cols = ", ".join(f"cell_{c.key}" for c in cols)
    return (f"SELECT * EXCLUDE ({cell_cols}), {', '.join(derived)} FROM "
            f"(SELECT {', '.join(parts)} FROM (SELECT {', '.join(cells)} FROM {staged}))")


def _row_key(by_file: bool) -> str:
    """One number per row: its row number, and with several files its file's ordinal too."""
    return "(fl_file * 1099511627776 + row_number)" if by_file else "row_number"


def _duplicates_sql(staged: str, cols: list[Column], by_file: bool = False) -> str:
    """Keys (:func:`_row_key`) of rows whose mapped cells repeat an earlier row's of the same
    file (all but the first)."""
    key = "hash(" + ", ".join(ident(c.column) for c in cols) + ")"
    group = "fl_file, row_hash" if by_file else "row_hash"
    files = "fl_file, " if by_file else ""
    return (f"WITH h AS (SELECT {files}row_number, {key} AS row_hash FROM {staged}), "
            f"d AS (SELECT {group}, min(row_number) AS first_row FROM h GROUP BY {group} "
            "HAVING count(*) > 1) "
            f"SELECT {_row_key(by_file)} AS row_key FROM h JOIN d USING ({group}) "
            "WHERE h.row_number > d.first_row")


def _scaled_sql(query: str, scale: str) -> str:
    """``query`` with ``si_T`` converted from ``scale`` to ITS-90 (layers of SQL arithmetic)."""
    if scale == "ITS-90":
        return query
    layers, result = SQL_CONVERSIONS[scale]("si_T")
    for expression, name in layers:
        query = f"SELECT *, {expression} AS {name} FROM ({query})"
    helpers = ", ".join(name for _, name in layers)
    return f"SELECT * EXCLUDE ({helpers}) REPLACE ({result} AS si_T) FROM ({query})"


def _fault_sql(cols: list[Column]) -> str:
    """CASE giving 'code|column' for the first fault of a row, NULL for a good row."""
    arms = []
    for c in cols:
        col = c.column.replace("'", "''")
        if c.required:
            arms.append(f"WHEN empty_{c.key} THEN 'missing-value|{col}'")
        arms.append(f"WHEN NOT empty_{c.key} AND si_{c.key} IS NULL THEN 'not-a-number|{col}'")
        arms.append(f"WHEN plain_{c.key} AND NOT isfinite(si_{c.key}) "
                    f"THEN 'out-of-physical-range|{col}'")
        arms.append(f"WHEN NOT empty_{c.key} AND NOT isfinite(si_{c.key}) THEN 'non-finite|{col}'")
        code = {"T": "non-positive-temperature", "pressure": "non-positive-pressure"}.get(
            c.key, "bad-uncertainty" if c.key.startswith("u_") else "non-positive-value")
        arms.append(f"WHEN NOT empty_{c.key} AND si_{c.key} <= 0 THEN '{code}|{col}'")
        if np.isfinite(c.upper):
            arms.append(f"WHEN NOT empty_{c.key} AND si_{c.key} > {c.upper!r} "
                        f"THEN 'out-of-physical-range|{col}'")
    values = [c for c in cols if c.key != "T" and not c.key.startswith("u_")]
    if values:
        none = " AND ".join(f"empty_{c.key}" for c in values)
        arms.append(f"WHEN {none} THEN 'missing-value|{values[0].column.replace(chr(39), chr(39) * 2)}'")
    arms.append("WHEN dup THEN 'duplicate-row|'")
    return "CASE " + " ".join(arms) + " END"


def normalise(con: duckdb.DuckDBPyConnection, staged: str, spec: TableSpec,
              molar_mass: float, out: str, by_file: bool = False, parsed: bool = False
              ) -> dict[str, dict]:
    """Create temp table ``out``: ``row_number``, and per mapped column ``txt_<key>`` (the cell
    as written), ``empty_<key>`` and ``si_<key>`` (its SI value), and ``fault`` (with
    ``parsed``, also ``num_<key>``, see :func:`normalised_query`).

    Returns the uncertainty rules per quantity key for the loader. One statement (a fixed
    cost per file counts when thousands of small files arrive): a materialised CTE of the
    row numbers of duplicate rows (a hash of their mapped cells, grouped once - not a window
    sort), then :func:`normalised_query`.

    With ``by_file``, ``staged`` holds the rows of several files of the same layout, told
    apart by the column ``fl_file`` (kept in ``out``): one statement normalises them all,
    duplicates counted within each file.
    """
    duplicates = "fl_duplicate_rows"   # a CTE of the one statement below
    query, rules = normalised_query(staged, spec, molar_mass, duplicates, by_file, parsed)
    con.execute(
        f"CREATE OR REPLACE TEMP TABLE {out} AS "
        f"WITH {duplicates} AS MATERIALIZED ({duplicates_sql(staged, spec, molar_mass, by_file)}"
        f") {query}")
    return rules


def duplicates_sql(staged: str, spec: TableSpec, molar_mass: float, by_file: bool = False
                   ) -> str:
    """The query of the row keys of ``staged`` that repeat an earlier row (see
    :func:`_duplicates_sql`), for a table or CTE named by :func:`normalised_query`."""
    return _duplicates_sql(staged, _plan(spec, molar_mass)[0], by_file)


def normalised_query(staged: str, spec: TableSpec, molar_mass: float, duplicates: str,
                     by_file: bool = False, parsed: bool = False) -> tuple[str, dict[str, dict]]:
    """The one pass over ``staged`` that parses, converts units and the temperature scale (SQL
    arithmetic generated from the published coefficients, :mod:`pipeline.ingest.scales`)
    and names each row's first fault: a query of ``row_number``, per mapped column
    ``txt_<key>``, ``empty_<key>`` and ``si_<key>``, and ``fault`` (with ``parsed``, also
    ``num_<key>``: the number read from the cell, before any conversion). ``duplicates``
    names a table (or CTE) of the keys of duplicate rows (:func:`duplicates_sql`).

    Returns the query and the uncertainty rules per quantity key for the loader."""
    cols, rules = _plan(spec, molar_mass)
    scale = get_scale(spec.temperature.scale).name
    if scale != "ITS-90" and scale not in SQL_CONVERSIONS:
        raise AssertionError(f"no SQL conversion for the supported scale {scale}")
    query = _scaled_sql(_parse_sql(staged, cols, spec, duplicates, by_file), scale)
    col = spec.temperature.column.replace("'", "''")
    # a finite temperature that the scale conversion turned into NaN is out of its range; this
    # wins over the generic "finite number became non-finite" arm of _fault_sql
    scale_arm = (f"WHEN isfinite(num_T) AND isnan(si_T) THEN 'out-of-scale-range|{col}' "
                 if scale != "ITS-90" else "")
    kinds = ("txt", "empty", "si", "num") if parsed else ("txt", "empty", "si")
    kept = ", ".join(f"{kind}_{c.key}" for c in cols for kind in kinds)
    return (f"SELECT {'fl_file, ' if by_file else ''}row_number, {kept}, CASE {scale_arm}"
            f"WHEN true THEN fault END AS fault FROM "
            f"(SELECT *, {_fault_sql(cols)} AS fault FROM ({query}))"), rules


def layout(spec: TableSpec, molar_mass: float) -> str:
    """What the SQL of :func:`normalise` depends on, as text: tables of one layout can be
    normalised in one statement (``by_file``)."""
    cols, rules = _plan(spec, molar_mass)
    return repr((cols, sorted((k, sorted(r.items())) for k, r in rules.items()),
                 spec.null_values, spec.decimal, get_scale(spec.temperature.scale).name,
                 spec.temperature.column, spec.delimiter,
                 [(q, c.column) for q, c in spec.value_columns().items()],
                 [(q, u.column) for q, u in spec.uncertainty.items()]))


#: scale -> SQL conversion to ITS-90 (layers, result), for every non-identity scale
SQL_CONVERSIONS = {"IPTS-68": ipts68_to_its90_sql}


def uncertainty_sql(key: str, rules: dict[str, dict]) -> str:
    """SQL expression for the standard uncertainty (k=1) of ``si_<key>``, or NULL."""
    rule = rules.get(key)
    if rule is None:
        return "NULL"
    k = float(rule["coverage"])
    if "relative" in rule:
        return f"abs(si_{key}) * {rule['relative'] / k!r}"
    if "value" in rule:
        return f"{rule['value'] / k!r}"
    return f"si_{rule['column']} / {k!r}"
