"""Open a published release from Python: constants, curves and provenance.

:func:`open_release` reads the published file (``published.duckdb``, beside the store by
default) - never the working store - with a read-only connection that is closed before it
returns: the release's tables are loaded in one snapshot, so the object never holds a lock, a
nightly run that swaps in a new published file (an atomic rename) neither waits for it nor
changes it, and it never sees half of two releases. A named release that is no longer the
published one is read from its export folder ``<root>/<release>/`` (Parquet), after the
SHA-256 of each file is checked against the folder's ``manifest.json``.

Values are SI throughout (K, Pa, kg/m^3, J/mol), as the ``unit`` columns say.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

from pipeline.api.curve import CURVE_KINDS, ReleasedCurve
from pipeline.errors import FluidLedgerError

TABLES = ("constants", "curves", "provenance")
_VIEWS = {"constants": "curated_constants", "curves": "curated_curves",
          "provenance": "curated_provenance"}
PROVENANCE_COLUMNS = (
    "value_id", "relation", "entity", "entity_id", "source_id", "file_path", "file_sha256",
    "row_number", "cell", "obs_id", "value_si", "u_si", "used", "note", "fit_id", "check_id",
    "subject", "status", "message", "decision_id", "citation")


class ReleaseError(FluidLedgerError):
    """A release cannot be opened, or it has no such value."""


@dataclass(frozen=True)
class Constant:
    """One released constant: value and standard uncertainty (k = 1) in SI ``unit``."""

    value_id: str
    fluid_id: str
    property: str
    value: float
    u: float | None
    unit: str
    method: str
    check_status: str


def _published_path(path) -> Path:
    from pipeline.publish.published import PUBLISHED_NAME
    from pipeline.store import resolve_store_path

    if path is None:
        return resolve_store_path(None).parent / PUBLISHED_NAME
    path = Path(path)
    return path / PUBLISHED_NAME if path.is_dir() else path


def _rows(con, sql: str) -> list[dict]:
    cur = con.execute(sql)
    names = [d[0] for d in cur.description]
    return [dict(zip(names, r)) for r in cur.fetchall()]


def _connect(file: Path):
    """A read-only connection to the published file. DuckDB refuses a second connection to a
    file with another configuration in one process, so a plain read-only connection comes
    first (as a user's own ``duckdb.connect(file, read_only=True)`` makes) and the locked-down
    configuration of ``fluidledger query`` second."""
    import duckdb

    from pipeline.publish.published import open_read_only

    try:
        return duckdb.connect(str(file), read_only=True)
    except duckdb.ConnectionException:
        return open_read_only(file)
    except duckdb.Error as err:
        raise ReleaseError(f"cannot open the published file: {err}", file=str(file)) from None


def _from_published(file: Path) -> tuple[dict, dict[str, list[dict]]]:
    con = _connect(file)
    try:
        info = _rows(con, "SELECT * FROM curated_release")
        if not info:
            raise ReleaseError("the published file holds no release", file=str(file))
        tables = {t: _rows(con, f"SELECT * FROM {v} ORDER BY value_id") for t, v in _VIEWS.items()}
    finally:
        con.close()
    return info[0], tables


def _from_folder(folder: Path) -> tuple[dict, dict[str, list[dict]]]:
    """A release's export folder, every file checked against its manifest first."""
    import pyarrow.parquet as pq

    manifest_file = folder / "manifest.json"
    if not manifest_file.is_file():
        raise ReleaseError("no such release (no manifest.json in its folder)", file=str(folder))
    manifest = json.loads(manifest_file.read_text("utf-8"))
    digests = {f["path"]: f["sha256"] for f in manifest.get("files", [])}
    out = {}
    for table in ("release",) + TABLES:
        name = f"{table}.parquet"
        data = (folder / name).read_bytes() if (folder / name).is_file() else None
        if data is None or hashlib.sha256(data).hexdigest() != digests.get(name):
            raise ReleaseError(f"{name} is missing or differs from manifest.json; the release "
                               "folder was changed after publishing", file=str(folder))
        out[table] = pq.read_table(folder / name).to_pylist()
    return out.pop("release")[0], out


def open_release(name: str | None = None, *, path=None) -> "Release":
    """Open the latest published release, or the release ``name``, read-only.

    Parameters
    ----------
    name : str, optional
        Release id (``fluidledger publish --release NAME``, else ``r-<12 hex>``); default:
        the release in the published file.
    path : path, optional
        The published file, or the folder holding it (the publish output root); default:
        ``published.duckdb`` beside the store (``$FLUIDLEDGER_STORE``, else
        ``curated/fluidledger.duckdb``).
    """
    file = _published_path(path)
    if not file.is_file() and name is None:
        raise ReleaseError("no published file (run 'fluidledger publish' or the nightly job)",
                           file=str(file))
    if file.is_file():
        info, tables = _from_published(file)
        if name is None or info["release_id"] == name:
            return Release(info, tables, str(file))
    info, tables = _from_folder(file.parent / name)
    return Release(info, tables, str(file.parent / name))


def _frame(rows: list[dict], columns, arrow: bool):
    import pandas as pd

    frame = pd.DataFrame(rows, columns=list(columns))
    if columns is PROVENANCE_COLUMNS:     # integer ids and flags stay integers beside gaps
        frame = frame.astype({"row_number": "Int64", "obs_id": "Int64", "used": "boolean"})
    if arrow:
        import pyarrow as pa

        return pa.Table.from_pandas(frame, preserve_index=False)
    return frame


class Release:
    """A release loaded in memory: ``constants()``, ``curves()``, ``curve()``,
    ``constant()`` and ``provenance()``. Build it with :func:`open_release`."""

    def __init__(self, info: dict, tables: dict[str, list[dict]], origin: str):
        self.info = dict(info)
        self.release_id: str = info["release_id"]
        self.origin = origin
        self._tables = tables
        self._columns = {t: list(tables[t][0]) if tables[t] else self._schema(t) for t in TABLES}

    @staticmethod
    def _schema(table: str) -> list[str]:
        from pipeline.publish.exports import SCHEMAS

        return SCHEMAS[table].names

    def __repr__(self) -> str:
        marked = ", with failed checks" if self.info.get("with_failed_checks") else ""
        return (f"<Release {self.release_id}: {len(self._tables['constants'])} constants, "
                f"{len(self._tables['curves'])} curves{marked}>")

    @property
    def fluids(self) -> list[str]:
        """The fluids the release has values for."""
        return sorted({r["fluid_id"] for t in ("constants", "curves") for r in self._tables[t]})

    # --- tables ----------------------------------------------------------------------------
    def _select(self, table: str, fluid: str | None) -> list[dict]:
        return [r for r in self._tables[table] if fluid is None or r["fluid_id"] == fluid]

    def constants(self, fluid: str | None = None, *, arrow: bool = False):
        """Released constants (value_si, u_si in the SI unit of ``unit``) as a pandas
        DataFrame, or a pyarrow Table with ``arrow=True``; one fluid with ``fluid``."""
        return _frame(self._select("constants", fluid), self._columns["constants"], arrow)

    def curves(self, fluid: str | None = None, *, arrow: bool = False):
        """Released curves (form, params, exponents, covariance, T_min_K..T_max_K) as a
        pandas DataFrame, or a pyarrow Table with ``arrow=True``."""
        return _frame(self._select("curves", fluid), self._columns["curves"], arrow)

    # --- single values ---------------------------------------------------------------------
    def constant(self, fluid: str, prop: str) -> Constant:
        """One constant by fluid and property (Tc, pc, rhoc, Tt, pt, normal_boiling_T,
        acentric_factor, h_fusion_triple...); for several triple points, the one of the
        vapour (the ordinary triple point) comes first."""
        rows = [r for r in self._select("constants", fluid) if r["property"] == prop]
        if not rows:
            have = sorted({r["property"] for r in self._select("constants", fluid)})
            raise ReleaseError(f"release {self.release_id} has no constant {prop!r} for "
                               f"{fluid!r} (it has: {have})")
        r = sorted(rows, key=lambda r: ("vapour" not in r["point"], r["value_id"]))[0]
        return Constant(r["value_id"], r["fluid_id"], r["property"], float(r["value_si"]),
                        None if r["u_si"] is None else float(r["u_si"]), r["unit"],
                        r["method"], r["check_status"])

    def curve(self, fluid: str, kind: str = "vapour_pressure", *, phase: str = "") -> ReleasedCurve:
        """A curve by fluid and kind - ``vapour_pressure``, ``melting_pressure``,
        ``sublimation_pressure``, ``saturated_liquid_density``, ``saturated_vapour_density``
        (as the SQL macros fl_<kind>) - and solid ``phase`` (polymorph label, e.g. Ih)."""
        if kind not in CURVE_KINDS:
            raise ReleaseError(f"unknown curve kind {kind!r}; valid: {', '.join(CURVE_KINDS)}")
        boundary, quantity = CURVE_KINDS[kind]
        for r in self._select("curves", fluid):
            if (r["boundary"], r["quantity"], r["solid_phase"]) == (boundary, quantity, phase):
                return ReleasedCurve.from_row(r)
        have = sorted(r["value_id"] for r in self._select("curves", fluid))
        raise ReleaseError(f"release {self.release_id} has no {kind} curve for {fluid!r}"
                           + (f" phase {phase!r}" if phase else "") + f" (it has: {have})")

    # --- provenance ------------------------------------------------------------------------
    def provenance(self, value, *, arrow: bool = False):
        """Where a value comes from, one row per item, as a pandas DataFrame (pyarrow Table
        with ``arrow=True``). ``value``: a value_id, a :class:`Constant` or a curve.

        ``relation`` says what a row is: ``wasGeneratedBy`` (the fit or recommendation step,
        with ``fit_id``), ``wasDerivedFrom`` (one row per raw row behind the value: file path
        and SHA-256, ``row_number``, workbook ``cell``, ``obs_id``, whether it was ``used`` and
        why not in ``note``; fixed points and constants with their batch.toml entry number),
        ``wasAttributedTo`` (sources with their citation), ``check`` (each finding of the
        check run bearing on the value: ``check_id``, ``subject``, ``status``, ``message``)
        and ``decision`` (each curation decision that shaped it).
        """
        value_id = getattr(value, "value_id", value)
        records = [r for r in self._tables["provenance"] if r["value_id"] == value_id]
        if not records:
            raise ReleaseError(f"release {self.release_id} has no value {value_id!r}")
        return _frame(list(_provenance_rows(records[0])), PROVENANCE_COLUMNS, arrow)


def _provenance_rows(rec: dict):
    """The long-format rows of one provenance record (see :meth:`Release.provenance`)."""
    base = dict.fromkeys(PROVENANCE_COLUMNS)
    vid = rec["value_id"]
    yield {**base, "value_id": vid, "relation": "wasGeneratedBy", "fit_id": rec["fit_id"],
           "note": rec["was_generated_by"]}
    for e in rec["was_derived_from"]:
        common = {**base, "value_id": vid, "relation": "wasDerivedFrom", "entity": e["entity"],
                  "entity_id": e["entity_id"], "source_id": e["source_id"],
                  "file_path": e["file_path"], "file_sha256": e["file_sha256"],
                  "value_si": e["value_si"], "u_si": e["u_si"], "used": e["used"],
                  "note": e["note"],
                  "fit_id": e["entity_id"] if e["entity"] == "fit" else rec["fit_id"]}
        rows, obs, cells = e["row_numbers"] or [], e["obs_ids"] or [], e.get("cells") or []
        if not rows:
            yield common
        for i, row in enumerate(rows):
            yield {**common, "row_number": row, "obs_id": obs[i] if i < len(obs) else None,
                   "cell": cells[i] if i < len(cells) else None}
    for s in rec["was_attributed_to"]:
        yield {**base, "value_id": vid, "relation": "wasAttributedTo", "entity": s["kind"],
               "source_id": s["source_id"], "citation": s["citation"], "used": s["used"]}
    for c in rec["checks"]:
        yield {**base, "value_id": vid, "relation": "check", "check_id": c["check_id"],
               "subject": c["subject"], "status": c["status"], "message": c["message"]}
    for d in rec["decision_ids"]:
        yield {**base, "value_id": vid, "relation": "decision", "decision_id": d}
