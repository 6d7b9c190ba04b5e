"""Bad inputs give one clear message naming file, row/key and column; never a traceback."""

from __future__ import annotations

import pytest

from pipeline.cli import main
from tests.conftest import SIMPLE_BATCH, SIMPLE_CSV, write_batch

GOOD = SIMPLE_BATCH.format(source="rig-a")


def run_cli(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


# (case, manifest, files, expected message fragment)
BATCH_ERRORS = [
    ("malformed TOML", "[source\nid = 1", {"vp.csv": SIMPLE_CSV}, "b1/batch.toml: malformed TOML"),
    ("schema violation", GOOD.replace('kind = "measurement"', 'kind = "rumour"'), {"vp.csv": SIMPLE_CSV},
     "key 'source.kind': does not match batch.schema.json: 'rumour' is not one of"),
    ("unknown unit", GOOD.replace('unit = "kPa"', 'unit = "kilopascal-ish"'), {"vp.csv": SIMPLE_CSV},
     "kilopascal-ish"),
    ("missing column", GOOD.replace('column = "p"', 'column = "p_kPa"'), {"vp.csv": SIMPLE_CSV},
     "column 'p_kPa' named for pressure is not in the header ['T', 'p']"),
    ("wrong delimiter", GOOD, {"vp.csv": SIMPLE_CSV.replace(",", ";")},
     "declare delimiter = ';'"),
    ("empty file", GOOD, {"vp.csv": ""}, "b1/vp.csv: file is empty"),
    ("header only", GOOD, {"vp.csv": "T,p\n"}, "b1/vp.csv: file has a header but no data rows"),
    ("path outside batch", GOOD.replace('file = "vp.csv"', 'file = "../vp.csv"'), {"vp.csv": SIMPLE_CSV},
     "key 'table[0].file'"),
    ("unknown fluid", GOOD.replace('fluid = "argon"', 'fluid = "xenon"'), {"vp.csv": SIMPLE_CSV},
     "fluid 'xenon' is not in fluids.toml"),
    ("unmapped column", GOOD, {"vp.csv": "T,p,note\n85.0,78.9,x\n"}, "unmapped column(s) ['note']"),
    ("latin-1 bytes", GOOD, {"vp.csv": "T,p\n85.0,78.9 \xb0\n".encode("latin-1")}, 'declare encoding = "latin-1"'),
]


@pytest.mark.parametrize("case,manifest,files,expected", BATCH_ERRORS, ids=[c[0] for c in BATCH_ERRORS])
def test_batch_level_error_exits_2_with_clear_message(raw_root, store_path, capsys, case, manifest,
                                                      files, expected):
    """A batch-level problem exits 2, names the file and what was expected, prints no traceback."""
    write_batch(raw_root, "b1", manifest, files)
    code, out, err = run_cli(capsys, "ingest", str(raw_root), "--store", str(store_path))
    assert code == 2
    assert expected in err
    assert "Traceback" not in err + out


def test_symlink_leaving_the_batch_is_refused(raw_root, store_path, capsys, tmp_path):
    """A table file that is a symlink to outside the batch folder is refused."""
    outside = tmp_path / "elsewhere.csv"
    outside.write_text(SIMPLE_CSV)
    folder = write_batch(raw_root, "b1", GOOD, {})
    (folder / "vp.csv").symlink_to(outside)
    code, _, err = run_cli(capsys, "ingest", str(raw_root), "--store", str(store_path))
    assert code == 2 and "resolves outside the batch folder" in err


def test_failed_batch_does_not_stop_the_others(raw_root, store_path, capsys):
    """One bad batch is reported; the good batch beside it is still loaded."""
    write_batch(raw_root, "a-good", GOOD, {"vp.csv": SIMPLE_CSV})
    write_batch(raw_root, "b-bad", GOOD.replace("rig-a", "rig-b"), {"vp.csv": ""})
    code, out, err = run_cli(capsys, "ingest", str(raw_root), "--store", str(store_path))
    assert code == 2 and "b-bad/vp.csv: file is empty" in err
    assert "ingest: 1 batch(es) loaded (3 rows read, 3 loaded, 0 quarantined)" in out


def test_utf8_bom_is_accepted(raw_root, store_path, capsys):
    """A UTF-8 byte-order mark before the header does not hide the first column."""
    write_batch(raw_root, "b1", GOOD, {"vp.csv": b"\xef\xbb\xbf" + SIMPLE_CSV.encode()})
    code, out, _ = run_cli(capsys, "ingest", str(raw_root), "--store", str(store_path))
    assert code == 0 and "3 loaded, 0 quarantined" in out


def test_decimal_commas_quarantine_unless_declared(raw_root, store_path, capsys):
    """Decimal commas in a dot-decimal file are not-a-number; declared decimal=',' loads them."""
    body = "T;p\n85,0;78,9\n87,3;101,3\n"
    write_batch(raw_root, "b1", GOOD.replace('pressure = { column', 'delimiter = ";"\npressure = { column', 1),
                {"vp.csv": body})
    code, out, _ = run_cli(capsys, "ingest", str(raw_root), "--store", str(store_path))
    assert code == 0 and "2 rows read, 0 loaded, 2 quarantined" in out
    manifest = GOOD.replace('pressure = { column', 'delimiter = ";"\ndecimal = ","\npressure = { column', 1)
    write_batch(raw_root, "b1", manifest, {"vp.csv": body})
    code, out, _ = run_cli(capsys, "ingest", str(raw_root), "--store", str(store_path))
    assert code == 0 and "2 rows read, 2 loaded, 0 quarantined" in out


def test_temperature_only_fixed_point_is_stored(raw_root, store_path):
    """A triple point stated with T but no p is stored with p NULL, not quarantined (issue 12)."""
    from pipeline.store import open_store

    manifest = GOOD + """
[[fixed_point]]
fluid = "argon"
kind = "triple"
T = { value = 83.8058, unit = "K", u = 0.0002 }
"""
    write_batch(raw_root, "b1", manifest, {"vp.csv": SIMPLE_CSV})
    assert main(["ingest", str(raw_root), "--store", str(store_path), "-q"]) == 0
    with open_store(store_path) as s:
        q = s.con.execute("SELECT count(*) FROM quarantine").fetchone()[0]
        point = s.con.execute("SELECT kind, T_K, p_Pa, u_p_Pa FROM fixed_point_current").fetchone()
        counts = s.con.execute("SELECT rows_read, rows_loaded, rows_quarantined FROM raw_file "
                               "WHERE role = 'manifest'").fetchone()
    assert q == 0 and counts == (1, 1, 0)
    assert point == ("triple", 83.8058, None, None)
