"""Normalise a staged CSV table: parse numbers, convert units and scales, route faults.

Everything here is set-based SQL over the staged table plus one vectorised numpy pass for
temperature-scale conversion; unit factors come from pint once per column
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
import pyarrow as pa

from pipeline.ingest.contract import TableSpec
from pipeline.ingest.scales import to_its90
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


def _parse_sql(staged: str, cols: list[Column], spec: TableSpec) -> str:
    """Parse every mapped cell once. ``plain_<key>``: the cell is an ordinary finite number in
    the declared decimal style (no unit, no thousands separator, no underscore); ``si_<key>``:
    its value in SI (NaN/inf kept so that the fault CASE can name them)."""
    nulls = ", ".join("'" + v.replace("'", "''") + "'" for v in spec.null_values)
    other = "." if spec.decimal == "," else ","
    parts, derived = ["row_number"], []
    for c in cols:
        cell = f"trim({ident(c.column)})"
        empty = f"({ident(c.column)} IS NULL OR {cell} = ''" + (
            f" OR {cell} IN ({nulls}))" if nulls else ")")
        raw = f"TRY_CAST(replace({cell}, ',', '.') AS DOUBLE)" if spec.decimal == "," else \
            f"TRY_CAST({cell} AS DOUBLE)"
        parts += [f"{ident(c.column)} AS txt_{c.key}", f"{empty} AS empty_{c.key}",
                  f"CASE WHEN contains({cell}, '_') OR contains({cell}, '{other}') THEN NULL "
                  f"ELSE {raw} END AS num_{c.key}"]
        # computed one level up, so that a CSV column named like an alias (num_T) cannot
        # shadow it: the outer query sees only the columns made here
        derived += [f"coalesce(isfinite(num_{c.key}) OR regexp_matches(trim(txt_{c.key}), "
                    f"'^[+-]?[0-9.,]+([eE][+-]?[0-9]+)?$'), false) AS plain_{c.key}",
                    f"num_{c.key} * {c.factor!r} + {c.offset!r} AS si_{c.key}"]
    parts.append("hash(" + ", ".join(ident(c.column) for c in cols) + ") AS row_hash")
    return f"SELECT *, {', '.join(derived)} FROM (SELECT {', '.join(parts)} FROM {staged})"


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
              molar_mass: float, out: str) -> dict[str, dict]:
    """Create temp table ``out`` with SI columns ``si_<key>``, texts and ``fault``.

    Returns the uncertainty rules per quantity key for the loader. Duplicate rows are found
    by a hash of their mapped cells (grouped once, then joined), not by a window sort.
    """
    cols, rules = _plan(spec, molar_mass)
    parsed = f"{out}_parsed"
    con.execute(f"CREATE OR REPLACE TEMP TABLE {parsed} AS {_parse_sql(staged, cols, spec)}")
    scale = spec.temperature.scale
    if scale != "ITS-90":
        _convert_scale(con, parsed, scale)
    col = spec.temperature.column.replace("'", "''")
    # a finite temperature that the scale conversion turned into NaN is out of its range; this
    # wins over the generic "finite number became non-finite" arm of _fault_sql
    scale_arm = (f"WHEN isfinite(num_T) AND isnan(si_T) THEN 'out-of-scale-range|{col}' "
                 if scale != "ITS-90" else "")
    con.execute(
        f"CREATE OR REPLACE TEMP TABLE {out} AS "
        f"WITH dups AS (SELECT row_hash, min(row_number) AS first_row FROM {parsed} "
        "GROUP BY row_hash HAVING count(*) > 1), "
        f"marked AS (SELECT p.*, coalesce(p.row_number > d.first_row, false) AS dup "
        f"FROM {parsed} p LEFT JOIN dups d USING (row_hash)), "
        f"faulted AS (SELECT *, {_fault_sql(cols)} AS fault FROM marked) "
        f"SELECT * EXCLUDE (fault), CASE {scale_arm}WHEN true THEN fault END AS fault FROM faulted")
    con.execute(f"DROP TABLE {parsed}")
    return rules


def _convert_scale(con: duckdb.DuckDBPyConnection, out: str, scale: str) -> None:
    """Convert si_T from ``scale`` to ITS-90 with the published difference functions (numpy)."""
    data = con.execute(f"SELECT row_number, si_T FROM {out} WHERE si_T > 0 AND isfinite(si_T)"
                       ).fetchnumpy()
    T = np.asarray(data["si_T"], dtype=float)
    converted = to_its90(T, scale) if T.size else T
    con.register("fl_scale_map", pa.table({"row_number": np.asarray(data["row_number"]),
                                            "T90": np.asarray(converted, dtype=float)}))
    con.execute(f"UPDATE {out} SET si_T = m.T90 FROM fl_scale_map m "
                f"WHERE {out}.row_number = m.row_number")
    con.unregister("fl_scale_map")


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
