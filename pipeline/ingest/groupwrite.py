"""What a group of small batches writes: one statement per table (see :mod:`.grouped`).

Each table's rows go to DuckDB as one Arrow table (binding thousands of ``VALUES``
parameters costs far more), in the store's column order, with the ids the group drew.
"""

from __future__ import annotations

import pyarrow as pa


def block(con, sequence: str, n: int) -> int | None:
    """The first of ``n`` consecutive ids drawn from ``sequence`` in one statement."""
    if n == 0:
        return None
    first, last = con.execute(f"SELECT min(v), max(v) FROM (SELECT nextval('{sequence}') AS v "
                              "FROM range(?))", [n]).fetchall()[0]
    if last - first + 1 != n:
        raise AssertionError(f"{sequence} gave no block of {n} ids")
    return first


def arrow(con, name: str, schema: list[tuple[str, pa.DataType]], rows: list) -> None:
    """Register ``rows`` (lists in ``schema``'s order) as the Arrow table ``name``."""
    con.register(name, pa.table({c: pa.array([r[i] for r in rows], t)
                                 for i, (c, t) in enumerate(schema)}))


def insert_from(con, name: str, schema, rows: list, sql: str) -> None:
    """Run ``sql`` (which reads ``name``) over ``rows`` registered as an Arrow table."""
    if not rows:
        return
    arrow(con, name, schema, rows)
    try:
        con.execute(sql)
    finally:
        con.unregister(name)


_S, _I, _F = pa.string(), pa.int64(), pa.float64()
RAW_FILE = [("file_id", _I), ("sha256", _S), ("mapping_sha256", _S), ("path", _S),
            ("batch", _S), ("role", _S), ("source_id", _S), ("table_index", _I),
            ("fluid_id", _S), ("boundary", _S), ("solid_phase", _S), ("size_bytes", _I),
            ("rows_read", _I), ("rows_loaded", _I), ("rows_quarantined", _I),
            ("ingest_run_id", _S), ("ingested_at", pa.timestamp("us")),
            ("superseded_by", _I), ("superseded_run_id", _S)]
SOURCE = [("source_id", _S), ("kind", _S), ("citation", _S), ("doi", _S), ("license", _S),
          ("batch", _S), ("run_id", _S)]
RAW_COLUMN = [("file_id", _I), ("quantity", _S), ("column", _S), ("unit", _S), ("scale", _S),
              ("si_unit", _S), ("rule", _S)]
FIXED_POINT = [("fp_id", _I), ("fluid_id", _S), ("kind", _S), ("phases", _S), ("T_K", _F),
               ("u_T_K", _F), ("p_Pa", _F), ("u_p_Pa", _F), ("rho_kg_m3", _F),
               ("u_rho_kg_m3", _F), ("source_id", _S), ("file_id", _I), ("sha", _S),
               ("path", _S), ("entry_number", _I), ("original_json", _S), ("run_id", _S)]
CONSTANT = [("const_id", _I), ("fluid_id", _S), ("name", _S), ("value_si", _F), ("u_si", _F),
            ("si_unit", _S), ("source_id", _S), ("file_id", _I), ("sha", _S), ("path", _S),
            ("entry_number", _I), ("original_json", _S), ("run_id", _S)]


def write_files(con, group) -> None:
    """The group's raw_file rows with their counts, its retirements and its sources: one
    statement each."""
    insert_from(con, "fl_gfiles", RAW_FILE, group.new_files,
                 "INSERT INTO raw_file SELECT * FROM fl_gfiles")
    from pipeline.ingest.stage import REMOVED

    rows = [[old, REMOVED if new is None else group.new_files[new][0], group.ing.run_id]
            for old, new in group.supersede]
    insert_from(con, "fl_gsupersede", [("old", _I), ("new", _I), ("run_id", _S)], rows,
                 "UPDATE raw_file SET superseded_by = s.new, superseded_run_id = s.run_id "
                 "FROM fl_gsupersede s WHERE raw_file.file_id = s.old")
    insert_from(con, "fl_gsources", SOURCE, group.sources,
                 "INSERT OR REPLACE INTO source SELECT * FROM fl_gsources")


def insert_points(con, group) -> None:
    """The fixed points and constants of the group's manifests, ids in the order the
    batch-alone path draws them."""
    run_id, ids = group.ing.run_id, [r[0] for r in group.new_files]
    fixed = group.points["fixed_point"]
    first = block(con, "fp_id_seq", len(fixed))
    rows = [[first + n, fluid, r["kind"], r["phases"], r["T_K"], r["u_T_K"], r["p_Pa"],
             r["u_p_Pa"], r["rho_kg_m3"], r["u_rho_kg_m3"], source, ids[index], sha, label,
             r["entry_number"], r["original_json"], run_id]
            for n, (index, fluid, source, sha, label, r) in enumerate(fixed)]
    insert_from(con, "fl_gfixed", FIXED_POINT, rows,
                 "INSERT INTO fixed_point SELECT * FROM fl_gfixed")
    constants = group.points["constant"]
    first = block(con, "const_id_seq", len(constants))
    rows = [[first + n, fluid, r["name"], r["value_si"], r["u_si"], r["si_unit"], source,
             ids[index], sha, label, r["entry_number"], r["original_json"], run_id]
            for n, (index, fluid, source, sha, label, r) in enumerate(constants)]
    insert_from(con, "fl_gconstants", CONSTANT, rows,
                 "INSERT INTO stated_constant SELECT * FROM fl_gconstants")
