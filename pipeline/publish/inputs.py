"""Everything a release is made from, read from the store in a few set-based queries.

:func:`load_inputs` returns :class:`ReleaseInputs`, plain JSON-safe data: fluids, sources,
current fixed points and stated constants, enthalpy observations, current fitted curves with
the raw rows behind each, and the findings of the check run the release rests on (with the
ids their evidence names). The release content is a pure function of these inputs, the policy
and the decisions, so the fingerprint - SHA-256 of their sort-keyed JSON - decides the content:
equal fingerprints give equal files. The check run id itself is kept out of the fingerprint
(a re-run of the checks with equal findings changes nothing).
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass, field
from typing import Any

import duckdb

from pipeline import __version__
from pipeline.correlations import Curve
from pipeline.errors import PublishError
from pipeline.store.runs import latest_check_run_id

ENTHALPY_QUANTITIES = ("h_fusion", "h_vaporization", "h_sublimation")
BAD_STATUSES = ("fail", "error")


_PLAIN = frozenset({int, str, bool, type(None)})


def _clean(value: Any) -> Any:
    """JSON-safe copy: non-finite floats -> None, tuples -> lists."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        if set(map(type, value)) <= _PLAIN:    # lists of ids: nothing to clean, one C call
            return list(value)
        return [_clean(v) for v in value]
    return value


#: column types whose values need no cleaning (no floats, lists or structs inside)
_CLEAN_TYPES = frozenset({"VARCHAR", "BIGINT", "INTEGER", "SMALLINT", "TINYINT", "UBIGINT",
                          "UINTEGER", "HUGEINT", "BOOLEAN", "DATE", "TIMESTAMP"})


def _rows(con: duckdb.DuckDBPyConnection, sql: str, params: list | None = None) -> list[dict]:
    """The rows as dicts, JSON-safe (:func:`_clean` on the columns that may need it)."""
    cur = con.execute(sql, params or [])
    names = [d[0] for d in cur.description]
    dirty = [n for n, d in zip(names, cur.description) if str(d[1]) not in _CLEAN_TYPES]
    rows = [dict(zip(names, r)) for r in cur.fetchall()]
    for row in rows:
        for name in dirty:
            row[name] = _clean(row[name])
    return rows


_REF_KEYS = ('"fp_id', '"obs_id', '"fit_id"', '"basis"', '"discrepant"', "\\u")


def _refs_of_text(text: str | None) -> dict[str, list]:
    """:func:`evidence_refs` of an evidence JSON text; texts that cannot name an id (none of
    the keys appears, nothing escaped) are not parsed."""
    if not text or not any(key in text for key in _REF_KEYS):
        return {"fp_ids": [], "obs_ids": [], "fit_ids": [], "discrepant": [], "stated": []}
    return evidence_refs(json.loads(text))


def evidence_refs(evidence: Any) -> dict[str, list]:
    """Ids a finding's evidence names: fixed points, observations, fits, discrepant sources and
    stated constants (``"basis": "stated NAME (SOURCE)"``), found at any depth."""
    fp, obs, fits, stated = set(), set(), set(), set()
    discrepant: list[str] = []
    stack = [evidence]
    while stack:              # depth first, containers only: scalars name nothing by themselves
        node = stack.pop()
        if isinstance(node, dict):
            for key, val in node.items():
                if key == "fp_ids" and isinstance(val, list):
                    fp.update(int(v) for v in val if isinstance(v, (int, float)))
                elif key in ("fp_id", "obs_id") and isinstance(val, (int, float)):
                    (fp if key == "fp_id" else obs).add(int(val))
                elif key == "obs_ids" and isinstance(val, list):
                    obs.update(int(v) for v in val if isinstance(v, (int, float)))
                elif key == "fit_id" and isinstance(val, str):
                    fits.add(val)
                elif key == "basis" and isinstance(val, str) and val.startswith("stated "):
                    name, _, rest = val[len("stated "):].partition(" (")
                    stated.add((name, rest.rstrip(")")))
                elif isinstance(val, (dict, list)):
                    stack.append(val)
        elif isinstance(node, list):
            stack.extend(item for item in node if isinstance(item, (dict, list)))
    if isinstance(evidence, dict) and isinstance(evidence.get("discrepant"), list):
        discrepant = sorted(str(s) for s in evidence["discrepant"])
    return {"fp_ids": sorted(fp), "obs_ids": sorted(obs), "fit_ids": sorted(fits),
            "discrepant": discrepant, "stated": sorted([n, s] for n, s in stated)}


@dataclass
class ReleaseInputs:
    """The store's content a release is made from (JSON-safe lists of row dicts)."""

    check_run_id: str
    pipeline_version: str = __version__
    fluids: list[dict] = field(default_factory=list)
    sources: dict[str, dict] = field(default_factory=dict)
    raw_files: dict[int, dict] = field(default_factory=dict)
    fixed_points: list[dict] = field(default_factory=list)
    constants: list[dict] = field(default_factory=list)
    enthalpy_observations: list[dict] = field(default_factory=list)
    fits: list[dict] = field(default_factory=list)
    fit_rows: dict[str, list[dict]] = field(default_factory=dict)
    checks: list[dict] = field(default_factory=list)
    _fixed_point_index: dict | None = field(default=None, init=False, repr=False, compare=False)
    _curves: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    def curve(self, fit: dict) -> Curve:
        """The fitted curve of a fit row (built once per fit)."""
        found = self._curves.get(fit["fit_id"])
        if found is None:
            found = self._curves[fit["fit_id"]] = Curve.from_dict(fit["curve"])
        return found

    #: the lists of rows that belong to one fluid each (by their ``fluid_id``)
    PER_FLUID = ("fluids", "fixed_points", "constants", "enthalpy_observations", "fits", "checks")

    def fixed_points_of(self, fluid_id: str, kind: str) -> list[dict]:
        """The fixed points of one fluid and kind, in fp_id order (indexed on first use)."""
        if self._fixed_point_index is None:
            index: dict[tuple[str, str], list[dict]] = {}
            for fp in self.fixed_points:
                index.setdefault((fp["fluid_id"], fp["kind"]), []).append(fp)
            self._fixed_point_index = index
        return self._fixed_point_index.get((fluid_id, kind), [])

    def _complete(self, whole: "ReleaseInputs") -> "ReleaseInputs":
        """Fill fit rows, raw files and sources from ``whole`` for the rows this part holds."""
        self.fit_rows = {f["fit_id"]: whole.fit_rows[f["fit_id"]] for f in self.fits
                         if f["fit_id"] in whole.fit_rows}
        rows = self.fixed_points + self.constants + self.enthalpy_observations
        files = {int(r["file_id"]) for r in rows if r["file_id"] is not None}
        files |= {int(r["file_id"]) for rs in self.fit_rows.values() for r in rs}
        self.raw_files = {k: whole.raw_files[k] for k in sorted(files) if k in whole.raw_files}
        sources = {r["source_id"] for r in rows} | {f["source_id"] for f in self.raw_files.values()}
        self.sources = {k: whole.sources[k] for k in sorted(sources, key=str)
                        if k in whole.sources}
        return self

    def subset(self, fluids) -> "ReleaseInputs":
        """The inputs of some fluids only: their rows (in the same order) and the raw files and
        sources those rows name. A release's rows of a fluid are a function of its subset."""
        keep = set(fluids)
        part = ReleaseInputs(self.check_run_id, self.pipeline_version)
        for name in self.PER_FLUID:
            setattr(part, name, [r for r in getattr(self, name) if r["fluid_id"] in keep])
        return part._complete(self)

    def partition(self) -> dict[str, "ReleaseInputs"]:
        """:meth:`subset` of every fluid that any row names, in one pass."""
        parts: dict[str, ReleaseInputs] = {}
        for name in self.PER_FLUID:
            for r in getattr(self, name):
                part = parts.get(r["fluid_id"])
                if part is None:
                    part = parts[r["fluid_id"]] = ReleaseInputs(self.check_run_id,
                                                                 self.pipeline_version)
                getattr(part, name).append(r)
        return {f: part._complete(self) for f, part in sorted(parts.items())}

    def counts(self) -> dict[str, int]:
        """Findings of the check run per status."""
        out: dict[str, int] = {}
        for c in self.checks:
            out[c["status"]] = out.get(c["status"], 0) + 1
        return out

    def bad_checks(self) -> list[dict]:
        return [c for c in self.checks if c["status"] in BAD_STATUSES]

    def fingerprint_doc(self, policy: dict, decisions: dict) -> dict:
        """Everything the content depends on (not the check run id)."""
        return {"pipeline_version": self.pipeline_version, "fluids": self.fluids,
                "sources": self.sources,
                "raw_files": {str(k): v for k, v in sorted(self.raw_files.items())},
                "fixed_points": self.fixed_points, "constants": self.constants,
                "enthalpy_observations": self.enthalpy_observations, "fits": self.fits,
                "fit_rows": self.fit_rows, "checks": self.checks, "policy": policy,
                "decisions": decisions}

    def fingerprint(self, policy: dict, decisions: dict) -> str:
        doc = json.dumps(self.fingerprint_doc(policy, decisions), sort_keys=True,
                         separators=(",", ":"), allow_nan=False)
        return hashlib.sha256(doc.encode("utf-8")).hexdigest()

    def fingerprints(self, policy: dict, decisions) -> tuple[str, dict[str, str]]:
        """:meth:`fingerprint` of all inputs, and of each fluid's :meth:`subset` with the
        decisions about it (``decisions``: a :class:`~pipeline.publish.policy.Decisions`).

        Every row is encoded to JSON once; the documents of the whole and of each fluid are
        joined from those texts exactly as ``json.dumps`` (sort-keyed, compact) writes them
        (``tests/publish/test_publish_incremental.py`` holds the two equal)."""
        texts = _RowTexts(self)
        per_fluid = {f: texts.digest(part, policy, decisions.restricted({f}).asdict())
                     for f, part in self.partition().items()}
        return texts.digest(self, policy, decisions.asdict()), per_fluid


_ENCODE = json.JSONEncoder(sort_keys=True, separators=(",", ":"), allow_nan=False).encode


class _RowTexts:
    """The JSON text of every row of some inputs, encoded once, and the fingerprint documents
    of the inputs and of their parts joined from those texts (the bytes ``json.dumps`` of
    :meth:`ReleaseInputs.fingerprint_doc` gives)."""

    _LISTS = ("checks", "constants", "enthalpy_observations", "fits", "fixed_points", "fluids")

    def __init__(self, whole: ReleaseInputs):
        self.rows = {id(r): _ENCODE(r) for name in self._LISTS for r in getattr(whole, name)}
        self.fit_rows = {k: _ENCODE(v) for k, v in whole.fit_rows.items()}
        self.raw_files = {str(k): _ENCODE(v) for k, v in whole.raw_files.items()}
        self.sources = {k: _ENCODE(v) for k, v in whole.sources.items()}

    @staticmethod
    def _object(items: dict[str, str]) -> str:
        return "{" + ",".join(_ENCODE(k) + ":" + items[k] for k in sorted(items)) + "}"

    def digest(self, part: ReleaseInputs, policy: dict, decisions: dict) -> str:
        rows = self.rows
        fields = {name: "[" + ",".join([rows[id(r)] for r in getattr(part, name)]) + "]"
                  for name in self._LISTS}
        fields["decisions"] = _ENCODE(decisions)
        fields["policy"] = _ENCODE(policy)
        fields["pipeline_version"] = _ENCODE(part.pipeline_version)
        fields["fit_rows"] = self._object({k: self.fit_rows[k] for k in part.fit_rows})
        fields["raw_files"] = self._object({str(k): self.raw_files[str(k)]
                                            for k in part.raw_files})
        fields["sources"] = self._object({k: self.sources[k] for k in part.sources})
        doc = self._object(fields)
        return hashlib.sha256(doc.encode("utf-8")).hexdigest()


def latest_check_run(con: duckdb.DuckDBPyConnection) -> str:
    """The newest finished check run; :class:`PublishError` when the store has none."""
    run_id = latest_check_run_id(con)
    if run_id is None:
        raise PublishError("the store holds no finished check run; run 'fluidledger check' "
                           "before publishing (a release rests on a check run)")
    return run_id


_FITS = """
SELECT fit_id, fluid_id, boundary, solid_phase, quantity, form, curve_json, n_points, n_used,
       n_flagged, weighted_rms, reduced_chi2, input_hash, fit_run_id
FROM fit WHERE is_current AND status = 'fitted' ORDER BY fit_id
"""
_FIT_ROWS = """
SELECT r.fit_id, o.file_id,
       CASE WHEN r.excluded_by IS NOT NULL THEN 'excluded' WHEN r.is_outlier THEN 'outlier'
            WHEN r.z IS NULL THEN 'outside' ELSE 'used' END AS role,
       coalesce(r.excluded_by, '') AS excluded_by,
       list(o.row_number ORDER BY o.row_number, o.obs_id) AS row_numbers,
       list(o.obs_id ORDER BY o.row_number, o.obs_id) AS obs_ids,
       coalesce(list(o.value_cell_ref ORDER BY o.row_number, o.obs_id)
                FILTER (WHERE o.value_cell_ref IS NOT NULL), []) AS cells
FROM fit_residual r
JOIN fit f ON f.fit_id = r.fit_id AND f.is_current AND f.status = 'fitted'
JOIN observation o ON o.obs_id = r.obs_id
GROUP BY ALL ORDER BY r.fit_id, o.file_id, role, excluded_by
"""


def load_inputs(con: duckdb.DuckDBPyConnection, check_run_id: str | None = None) -> ReleaseInputs:
    """Read the inputs of a release from an open store (the latest check run by default)."""
    run_id = check_run_id or latest_check_run(con)
    inp = ReleaseInputs(check_run_id=run_id)
    inp.fluids = _rows(con, "SELECT fluid_id, name, formula, cas_rn, molar_mass_kg_mol "
                            "FROM fluid ORDER BY fluid_id")
    inp.sources = {r.pop("source_id"): r for r in _rows(
        con, "SELECT source_id, kind, citation, doi, license FROM source ORDER BY source_id")}
    inp.fixed_points = _rows(con, """
        SELECT fp_id, fluid_id, kind, phases, T_K, u_T_K, p_Pa, u_p_Pa, rho_kg_m3, u_rho_kg_m3,
               source_id, file_id, entry_number
        FROM fixed_point_current ORDER BY fp_id""")
    inp.constants = _rows(con, """
        SELECT const_id, fluid_id, name, value_si, u_si, si_unit, source_id, file_id, entry_number
        FROM stated_constant_current ORDER BY const_id""")
    inp.enthalpy_observations = _rows(con, """
        SELECT obs_id, fluid_id, boundary, solid_phase, quantity, T_K, u_T_K, value_si,
               u_value_si, source_id, file_id, row_number, value_cell_ref
        FROM observation_current WHERE list_contains(?, quantity) ORDER BY obs_id""",
                                      [list(ENTHALPY_QUANTITIES)])
    inp.fits = _rows(con, _FITS)
    for fit in inp.fits:
        fit["curve"] = json.loads(fit.pop("curve_json"))
    for row in _rows(con, _FIT_ROWS):
        inp.fit_rows.setdefault(row.pop("fit_id"), []).append(row)
    file_ids = {r["file_id"] for r in inp.fixed_points + inp.constants + inp.enthalpy_observations}
    file_ids |= {r["file_id"] for rows in inp.fit_rows.values() for r in rows}
    if file_ids:
        for r in _rows(con, "SELECT file_id, sha256, path, source_id FROM raw_file "
                            "WHERE list_contains(?, file_id) ORDER BY file_id", [sorted(file_ids)]):
            inp.raw_files[int(r.pop("file_id"))] = r
    for r in _rows(con, "SELECT check_id, fluid_id, subject, status, message, evidence_json "
                        "FROM check_result WHERE run_id = ? ORDER BY check_id, fluid_id, subject",
                   [run_id]):
        r["refs"] = _refs_of_text(r.pop("evidence_json"))
        inp.checks.append(r)
    return inp
