"""What changed between two releases, and which sources caused it.

Values are matched by ``value_id`` (stable across releases). A constant that changed reports
old and new value and uncertainty and the change in units of the combined standard
uncertainty, z = (new - old) / sqrt(u_old^2 + u_new^2). A curve that changed (form,
coefficients or range) reports its old and new value at the new curve's reference temperature
(``T_ref_K``: Tc or Tt; the value the SQL user gets there), the largest z over a grid of
:data:`CURVE_GRID` points of the common range, with u from each curve's covariance
(``Curve.u``), and the largest relative change. The causes come from the two provenance records: sources and raw entities that are used
in one release and not the other, raw files whose content hash changed, and candidates whose
stated value changed.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import duckdb
import numpy as np

from pipeline.correlations import Curve
from pipeline.errors import PublishError

CURVE_GRID = 33


@dataclass
class ValueChange:
    value_id: str
    change: str                       # added | removed | changed
    kind: str                         # constant | curve
    unit: str
    old: float | None = None
    new: float | None = None
    u_old: float | None = None
    u_new: float | None = None
    z: float | None = None
    relative: float | None = None
    T_ref_K: float | None = None      # curves: old and new are the values at this temperature
    detail: str = ""
    causes: list[str] = field(default_factory=list)
    sources_added: list[str] = field(default_factory=list)
    sources_removed: list[str] = field(default_factory=list)


@dataclass
class ReleaseDiff:
    release_a: str
    release_b: str
    changes: list[ValueChange]
    unchanged: int

    def asdict(self) -> dict:
        return asdict(self)

    def count(self, change: str) -> int:
        return sum(c.change == change for c in self.changes)

    def asstr(self) -> str:
        return (f"{self.release_a} -> {self.release_b}: {self.count('added')} added, "
                f"{self.count('removed')} removed, {self.count('changed')} changed, "
                f"{self.unchanged} unchanged")


def _load(con: duckdb.DuckDBPyConnection, release_id: str,
          fluids: list[str] | None = None) -> dict[str, dict]:
    if con.execute("SELECT count(*) FROM release WHERE release_id = ?", [release_id]).fetchone()[0] == 0:
        known = [r[0] for r in con.execute("SELECT release_id FROM release ORDER BY created_at")
                 .fetchall()]
        raise PublishError(f"no release {release_id!r} in the store; known: "
                           f"{', '.join(known) or 'none'}")
    out: dict[str, dict] = {}
    only, params = ("", [release_id]) if fluids is None else \
        (" AND list_contains(?, fluid_id)", [release_id, list(fluids)])
    for table, kind in (("release_constant", "constant"), ("release_curve", "curve")):
        cur = con.execute(f"SELECT * FROM {table} WHERE release_id = ?{only} ORDER BY value_id",
                          params)
        names = [d[0] for d in cur.description]
        for row in cur.fetchall():
            rec = dict(zip(names, row))
            out[rec["value_id"]] = {"kind": kind, "row": rec}
    cur = con.execute("SELECT value_id, was_attributed_to, was_derived_from FROM "
                      f"release_provenance WHERE release_id = ?{only}", params)
    for value_id, attributed, derived in cur.fetchall():
        if value_id in out:
            out[value_id]["attributed"] = attributed
            out[value_id]["derived"] = derived
    return out


def _curve(row: dict) -> Curve:
    return Curve(form=row["form"], params=tuple(row["params"]),
                 ref={"T_ref_K": row["T_ref_K"], "exponents": tuple(row["exponents"])},
                 covariance=row["covariance"], T_min_K=row["T_min_K"], T_max_K=row["T_max_K"])


def _entity_key(e: dict) -> tuple:
    return (e["entity"], e["entity_id"], e["file_path"] or "")


def _rows_text(rows) -> str:
    """``1-3, 7`` for rows [1, 2, 3, 7]."""
    rows, out = sorted(set(int(r) for r in rows)), []
    for r in rows:
        if out and r == out[-1][1] + 1:
            out[-1][1] = r
        else:
            out.append([r, r])
    return ", ".join(f"{a}" if a == b else f"{a}-{b}" for a, b in out)


def _entity_text(e: dict) -> str:
    """An entity in words: observations are counted (their id is the raw file's)."""
    if e["entity"] == "observations":
        rows = e.get("row_numbers") or []
        n = len(rows) or len(e.get("obs_ids") or [])
        what = f"{n} observation{'s' if n != 1 else ''}"
        where = f" of {e['file_path']}" if e.get("file_path") else f" of raw file {e['entity_id']}"
        return what + where + (f" (rows {_rows_text(rows)})" if rows else "")
    return f"{e['entity']} {e['entity_id']}" + (
        f" ({e['file_path']})" if e.get("file_path") else "")


def causes(a: dict, b: dict) -> tuple[list[str], list[str], list[str]]:
    """(causes in words, sources newly used, sources no longer used) between two records."""
    used_a = {s["source_id"] for s in a.get("attributed", []) if s["used"]}
    used_b = {s["source_id"] for s in b.get("attributed", []) if s["used"]}
    ents_a = {_entity_key(e): e for e in a.get("derived", [])}
    ents_b = {_entity_key(e): e for e in b.get("derived", [])}
    out = []
    for key in sorted(set(ents_a) | set(ents_b)):
        ea, eb = ents_a.get(key), ents_b.get(key)
        where = _entity_text(eb if eb is not None and eb["used"] else ea or eb)
        src = (eb or ea)["source_id"]
        who = f" from {src}" if src else ""
        if ea is None or not ea["used"]:
            if eb is not None and eb["used"]:
                out.append(f"now uses {where}{who}")
            continue
        if eb is None or not eb["used"]:
            note = f": {eb['note']}" if eb is not None and eb["note"] else ""
            out.append(f"no longer uses {where}{who}{note}")
            continue
        if ea["file_sha256"] != eb["file_sha256"]:
            out.append(f"{where}{who}: file content changed "
                       f"({(ea['file_sha256'] or '-')[:12]} -> {(eb['file_sha256'] or '-')[:12]})")
        elif ea["value_si"] != eb["value_si"] or ea["u_si"] != eb["u_si"]:
            out.append(f"{where}{who}: candidate {ea['value_si']!r} ± {ea['u_si']!r} -> "
                       f"{eb['value_si']!r} ± {eb['u_si']!r}")
        elif ea["row_numbers"] != eb["row_numbers"]:
            out.append(f"{where}{who}: rows changed (from {_entity_text(ea)})")
    return out, sorted(used_b - used_a), sorted(used_a - used_b)


def _z(old, new, u_old, u_new) -> float | None:
    comb = math.hypot(u_old or 0.0, u_new or 0.0)
    return (new - old) / comb if comb > 0 else None


def _at_reference(ca: Curve, cb: Curve, T_ref) -> tuple:
    """(T_ref, old value, new value, old u, new u) at the new curve's reference temperature;
    Nones when the new curve has none or a value is not finite there."""
    if T_ref is None or not math.isfinite(T_ref):
        return (None,) * 5
    with np.errstate(all="ignore"):
        vals = [float(c.value(T_ref, extrapolate=True)) for c in (ca, cb)]
        us = [float(c.u(T_ref, extrapolate=True)) if c.covariance is not None else math.nan
              for c in (ca, cb)]
    fin = [v if math.isfinite(v) else None for v in vals + us]
    return (float(T_ref), *fin)


def _compare_curves(ra: dict, rb: dict) -> tuple[float | None, float | None, str]:
    ca, cb = _curve(ra), _curve(rb)
    lo, hi = max(ca.T_min_K, cb.T_min_K), min(ca.T_max_K, cb.T_max_K)
    if not lo < hi:
        return None, None, "the two curves' ranges do not overlap"
    T = np.linspace(lo, hi, CURVE_GRID)
    va, vb = ca.value(T), cb.value(T)
    ua, ub = np.nan_to_num(ca.u(T)), np.nan_to_num(cb.u(T))
    comb = np.hypot(ua, ub)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(comb > 0, (vb - va) / comb, np.nan)
        rel = np.abs(vb / va - 1.0)
    i = int(np.nanargmax(np.abs(z))) if np.isfinite(z).any() else None
    detail = (f"{ra['form']} -> {rb['form']}, range {ra['T_min_K']:.6g}-{ra['T_max_K']:.6g} K -> "
              f"{rb['T_min_K']:.6g}-{rb['T_max_K']:.6g} K")
    if i is not None:
        detail += f"; largest |z| at {T[i]:.6g} K"
    return (float(z[i]) if i is not None else None,
            float(np.nanmax(rel)) if np.isfinite(rel).any() else None, detail)


_CURVE_KEYS = ("form", "params", "exponents", "T_ref_K", "T_min_K", "T_max_K", "covariance")


def diff_releases(con: duckdb.DuckDBPyConnection, release_a: str, release_b: str, *,
                  fluids: list[str] | None = None) -> ReleaseDiff:
    """Values added, removed and changed from ``release_a`` to ``release_b`` (store tables).

    ``fluids`` restricts the comparison to the values of these fluids (``unchanged`` then
    counts theirs only): the nightly job passes the fluids a release recomputed or dropped,
    since the rows of the others were copied from ``release_a`` and cannot differ."""
    a, b = _load(con, release_a, fluids), _load(con, release_b, fluids)
    changes, unchanged = [], 0
    for vid in sorted(set(a) | set(b)):
        va, vb = a.get(vid), b.get(vid)
        kind = (vb or va)["kind"]
        row = (vb or va)["row"]
        if va is None or vb is None:
            change = ValueChange(vid, "added" if va is None else "removed", kind, row["unit"])
            if kind == "constant":
                value = row["value_si"]
            else:   # a curve: its value at its reference temperature
                c = _curve(row)
                change.T_ref_K, value, _, _, _ = _at_reference(c, c, row["T_ref_K"])
            change.new = value if va is None else None
            change.old = value if vb is None else None
            change.causes, change.sources_added, change.sources_removed = causes(va or {}, vb or {})
            changes.append(change)
            continue
        ra, rb = va["row"], vb["row"]
        if kind == "constant":
            if ra["value_si"] == rb["value_si"] and ra["u_si"] == rb["u_si"]:
                unchanged += 1
                continue
            change = ValueChange(vid, "changed", kind, rb["unit"], ra["value_si"], rb["value_si"],
                                 ra["u_si"], rb["u_si"],
                                 _z(ra["value_si"], rb["value_si"], ra["u_si"], rb["u_si"]),
                                 abs(rb["value_si"] / ra["value_si"] - 1.0)
                                 if ra["value_si"] else None,
                                 detail=f"{ra['method']} -> {rb['method']}: "
                                        f"{rb['method_detail']}")
        else:
            if all(ra[k] == rb[k] for k in _CURVE_KEYS):
                unchanged += 1
                continue
            z, rel, detail = _compare_curves(ra, rb)
            T_ref, old, new, u_old, u_new = _at_reference(_curve(ra), _curve(rb), rb["T_ref_K"])
            change = ValueChange(vid, "changed", kind, rb["unit"], old, new, u_old, u_new, z=z,
                                 relative=rel, T_ref_K=T_ref, detail=detail)
        change.causes, change.sources_added, change.sources_removed = causes(va, vb)
        changes.append(change)
    return ReleaseDiff(release_a, release_b, changes, unchanged)
