"""Workbook readers and workbook ingest on a 100k-row sheet (ratios and peak memory, not tests).

Writes one .xlsx (default 100,000 data rows of T, p, u_p) and the same rows as CSV, then in
separate spawned processes (peak RSS per phase):
  1. python-calamine: every cell of the sheet as Python values (the reader the ingest uses);
  2. openpyxl read-only: every cell with its type (the alternative; it keeps error cells);
  3. fluidledger ingest of the workbook table;
  4. fluidledger ingest of the same rows as a CSV table;
  5. fluidledger ingest of the workbook with error cells (calamine reads them as empty, so
     their cells are located with openpyxl: the slow path, only for such workbooks).
Prints the times, openpyxl / calamine, workbook / CSV ingest and the error-cell ratio.

    python benchmarks/workbook.py [--rows N]
"""

from __future__ import annotations

import argparse
import io
import multiprocessing as mp
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

FLUIDS = """[[fluid]]
id = "argon"
name = "argon"
molar_mass = { value = 39.948, unit = "g/mol" }
"""
TABLE = """[source]
id = "{source}"
kind = "measurement"
citation = "synthetic benchmark data"

[[table]]
file = "{file}"
{sheet}fluid = "argon"
boundary = "liquid-vapour"
temperature = {{ column = "T", unit = "K" }}
pressure = {{ column = "p", unit = "kPa" }}
[table.uncertainty]
temperature = {{ value = 0.01, unit = "K" }}
pressure = {{ column = "u_p", unit = "kPa", coverage = 2 }}
"""
ERROR_CELLS = 10


def rows_of(n: int) -> np.ndarray:
    rng = np.random.default_rng(1)
    T = np.round(rng.uniform(84.0, 150.0, n), 6)
    p = np.round(68.9 * np.exp(9.0 * (1 - 83.8 / T)) * (1 + 1e-4 * rng.standard_normal(n)), 5)
    return np.column_stack([T, p, np.round(p * 1e-3, 6)])


def write_xlsx(path: Path, data: np.ndarray, errors: int = 0) -> None:
    import xlsxwriter

    book = xlsxwriter.Workbook(str(path), {"constant_memory": True})
    ws = book.add_worksheet("Data")
    ws.write_row(0, 0, ["T", "p", "u_p"])
    bad = set(np.linspace(1, len(data) - 1, errors).astype(int)) if errors else set()
    for i, (T, p, u) in enumerate(data.tolist()):
        ws.write_number(i + 1, 0, T)
        if i in bad:
            ws.write_formula(i + 1, 1, "=1/0", None, "#DIV/0!")
        else:
            ws.write_number(i + 1, 1, p)
        ws.write_number(i + 1, 2, u)
    book.close()


def make(root: Path, n: int) -> Path:
    raw = root / "raw"
    data = rows_of(n)
    for name, file, sheet in (("wb", "big.xlsx", 'sheet = "Data"\n'), ("csv", "big.csv", ""),
                              ("wberr", "bad.xlsx", 'sheet = "Data"\n')):
        folder = raw / name
        folder.mkdir(parents=True)
        (folder / "batch.toml").write_text(TABLE.format(source=f"bench-{name}", file=file,
                                                        sheet=sheet))
    (raw / "fluids.toml").write_text(FLUIDS)
    write_xlsx(raw / "wb" / "big.xlsx", data)
    write_xlsx(raw / "wberr" / "bad.xlsx", data, ERROR_CELLS)
    lines = ["T,p,u_p"] + [f"{T!r},{p!r},{u!r}" for T, p, u in data.tolist()]
    (raw / "csv" / "big.csv").write_text("\n".join(lines) + "\n")
    return raw


def peak() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def calamine(path: str, out) -> None:
    import python_calamine

    data = Path(path).read_bytes()
    t0 = time.perf_counter()
    book = python_calamine.CalamineWorkbook.from_filelike(io.BytesIO(data))
    rows = book.get_sheet_by_name("Data").to_python(skip_empty_area=False)
    out.put((time.perf_counter() - t0, peak(), len(rows) - 1))


def openpyxl_ro(path: str, out) -> None:
    import openpyxl

    data = Path(path).read_bytes()
    t0 = time.perf_counter()
    book = openpyxl.load_workbook(io.BytesIO(data), read_only=True, data_only=True)
    rows = [[(c.value, c.data_type) for c in r] for r in book["Data"].iter_rows()]
    book.close()
    out.put((time.perf_counter() - t0, peak(), len(rows) - 1))


def ingest(batch: str, db: str, out) -> None:
    from pipeline.ingest.stage import run_ingest
    from pipeline.store import open_store

    t0 = time.perf_counter()
    with open_store(db) as s:
        result = run_ingest(s.con, [Path(batch)], fluids_file=Path(batch).parent / "fluids.toml")
    assert not result.errors, result.asstr()
    out.put((time.perf_counter() - t0, peak(), result.batches[0].rows))


def phase(target, *args):
    ctx = mp.get_context("spawn")
    q = ctx.Queue()
    p = ctx.Process(target=target, args=(*args, q))
    p.start()
    res = q.get()
    p.join()
    return res


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        raw = make(Path(tmp), args.rows)
        xlsx = str(raw / "wb" / "big.xlsx")
        t_cal, m_cal, n_cal = phase(calamine, xlsx)
        t_opx, m_opx, n_opx = phase(openpyxl_ro, xlsx)
        t_wb, m_wb, r_wb = phase(ingest, str(raw / "wb"), str(Path(tmp) / "wb.duckdb"))
        t_csv, m_csv, r_csv = phase(ingest, str(raw / "csv"), str(Path(tmp) / "csv.duckdb"))
        t_err, m_err, r_err = phase(ingest, str(raw / "wberr"), str(Path(tmp) / "err.duckdb"))
        size = Path(xlsx).stat().st_size
    assert n_cal == n_opx == args.rows and r_wb == r_csv
    print(f"sheet: {args.rows:,} rows x 3 numbers, {size / 1e6:.1f} MB .xlsx")
    print(f"python-calamine, all cells:      {t_cal:6.2f} s, peak RSS {m_cal:5.0f} MiB")
    print(f"openpyxl read-only, typed cells: {t_opx:6.2f} s, peak RSS {m_opx:5.0f} MiB")
    print(f"ratio openpyxl / calamine: {t_opx / t_cal:.1f}")
    print(f"ingest, workbook table:          {t_wb:6.2f} s, peak RSS {m_wb:5.0f} MiB "
          f"(read {r_wb[0]:,}, loaded {r_wb[1]:,}, quarantined {r_wb[2]:,})")
    print(f"ingest, same rows as CSV:        {t_csv:6.2f} s, peak RSS {m_csv:5.0f} MiB")
    print(f"ratio workbook / CSV ingest: {t_wb / t_csv:.1f}")
    print(f"ingest, workbook with {ERROR_CELLS} error cells: {t_err:6.2f} s, peak RSS {m_err:5.0f} MiB "
          f"(quarantined {r_err[2]:,})")
    print(f"ratio error-cell workbook / clean workbook: {t_err / t_wb:.1f}")


if __name__ == "__main__":
    main()
