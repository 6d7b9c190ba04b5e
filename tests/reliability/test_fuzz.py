"""Property-based fuzzing of the CSV and batch.toml readers through the ingest stage.

Properties, for any input:

* the ingest never raises: it returns a result, and a refused batch carries a one-line
  :class:`~pipeline.errors.FluidLedgerError` message that names a file of the batch;
* a refused batch leaves no row in the store;
* every data row is loaded or quarantined: ``rows_read = rows_loaded + rows_quarantined`` for
  every file, matching the rows actually stored, and ``rows_read`` equals the number of data
  lines of the file (non-blank lines after the header);
* rows the fuzzer did not touch load with exactly the values written (when no quote was
  planted, since an open quote may rightly swallow the lines after it).

Bounded for CI by the ``fluidledger-ci`` hypothesis profile (60 examples per property, no
deadline). The long run uses ``fluidledger-long`` with ``FLUIDLEDGER_FUZZ_EXAMPLES`` examples::

    FLUIDLEDGER_FUZZ_EXAMPLES=5000 python -m pytest tests/reliability/test_fuzz.py \
        --hypothesis-show-statistics
"""

from __future__ import annotations

import copy
import math
import os
import shutil
import tempfile
import textwrap
from dataclasses import dataclass
from pathlib import Path

import duckdb
import pytest
import tomlkit
from hypothesis import HealthCheck, assume, event, given, settings
from hypothesis import strategies as st
from hypothesis.control import currently_in_test_context

from pipeline.ingest.stage import run_ingest
from pipeline.store.migrations import migrate
from pipeline.verify import VerifyResult, rules_named, verify_store
from tests.conftest import FLUIDS_TOML

LONG_EXAMPLES = int(os.environ.get("FLUIDLEDGER_FUZZ_EXAMPLES", "0"))
settings.register_profile("fluidledger-ci", max_examples=60, deadline=None, print_blob=True,
                          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
settings.register_profile("fluidledger-long", parent=settings.get_profile("fluidledger-ci"),
                          max_examples=max(LONG_EXAMPLES, 1))
FUZZ = settings(settings.get_profile("fluidledger-long" if LONG_EXAMPLES else "fluidledger-ci"))
INVARIANTS = rules_named("accounting.", "fk.observation.", "fk.quarantine.", "fk.raw_column.",
                         "provenance.raw_column", "unique.", "versions.")

MANIFEST = textwrap.dedent("""\
    format_version = 1

    [source]
    id = "fuzz-rig"
    kind = "measurement"
    citation = "Invented fuzzing rig, no real campaign"

    [[table]]
    file = "vp.csv"
    fluid = "argon"
    boundary = "liquid-vapour"
    encoding = "{encoding}"
    temperature = {{ column = "T", unit = "K" }}
    pressure = {{ column = "p", unit = "kPa" }}
    """)

# a complete, valid batch.toml as data: the seed of the mutation property
VALID_DOC = {
    "format_version": 1,
    "source": {"id": "fuzz-rig", "kind": "literature", "citation": "Invented table, no real paper",
               "doi": "", "license": "internal"},
    "table": [{
        "file": "vp.csv", "fluid": "argon", "boundary": "liquid-vapour", "delimiter": ",",
        "decimal": ".", "encoding": "utf-8", "quote": '"', "null_values": ["-"],
        "extra_columns": "error",
        "temperature": {"column": "T", "unit": "degC", "scale": "IPTS-68"},
        "pressure": {"column": "p", "unit": "bar", "reference": "absolute"},
        "uncertainty": {"temperature": {"value": 0.01, "unit": "K"},
                        "pressure": {"column": "U_p", "unit": "kPa", "coverage": 2}},
        "columns": {"rho_liquid": {"column": "rho", "unit": "g/cm^3"}},
    }],
    "fixed_point": [{"fluid": "argon", "kind": "triple", "phases": ["vapour", "liquid", "solid"],
                     "T": {"value": 83.8058, "unit": "K", "u": 0.0002},
                     "p": {"value": 68.89, "unit": "kPa", "u": 0.02}}],
    "constant": [{"fluid": "argon", "name": "acentric_factor", "value": -0.0022, "unit": "1"}],
}
VALID_CSV = b"T,p,U_p,rho\n-188.15,0.789,0.02,1.41\n-185.85,1.013,0.02,1.39\n-183.15,1.336,0.03,1.37\n"

HOSTILE = ["", " ", "'", '"', "'); DROP TABLE observation; --", "\"; DELETE FROM raw_file; --",
           "../outside.csv", "/etc/passwd", "vp.csv", "K", "kPa", "kpa", "degC", "IPTS-48",
           "ITS-90", "gauge", "argon", "xenon", "nan", "1e309", "\x00", "\u202e", "é", "#", "\\"]
# values a careful author might write: mutations with them often still load
PLAUSIBLE_TEXT = st.sampled_from([
    "K", "degC", "degF", "degR", "Pa", "kPa", "MPa", "bar", "atm", "torr", "mmHg", "psi", "psig",
    "kg/m^3", "g/cm^3", "mol/L", "J/mol", "ITS-90", "IPTS-68", "IPTS-48", "absolute", "gauge",
    ",", ";", "\t", "|", ".", "utf-8", "latin-1", "utf-8-sig", "ignore", "error",
    "liquid-vapour", "solid-liquid", "solid-vapour", "Ih", "T", "p", "rho", "U_p", "water",
    "argon", "xenon", "critical", "triple", "standard", "vp.csv", "other.csv", "-", "1", ""])
PLAUSIBLE = st.one_of(PLAUSIBLE_TEXT, st.floats(-1e6, 1e6), st.integers(-5, 5), st.just([]),
                      st.just(["n/a"]))
GARBAGE = st.one_of(
    st.sampled_from(["", " ", "NaN", "nan", "-inf", "Infinity", "1e308", "1e309", "-1e309", "0",
                     "-0", "-5", "1,5", "1.234,5", "101.3 kPa", "0x1F", "\u0661\u0662", "\u22123",
                     "1_0", "  7  ", "1e", "e5", ".", "+", "--1", "\x00", "\u00a0", "#", ";",
                     "\t", "|", "'", "5e-400", "1" * 400]),
    st.text(st.characters(blacklist_characters="\r\n", blacklist_categories=("Cs",)),
            max_size=12),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(min_value=-10**30, max_value=10**30).map(str),
)
TOML_VALUE = st.recursive(
    st.one_of(st.sampled_from(HOSTILE), st.text(max_size=10), st.integers(-10**20, 10**20),
              st.floats(allow_nan=True, allow_infinity=True), st.booleans()),
    lambda inner: st.one_of(st.lists(inner, max_size=3),
                            st.dictionaries(st.sampled_from(["value", "unit", "column", "x"]),
                                            inner, max_size=3)),
    max_leaves=6)


@dataclass
class Env:
    """One in-memory store shared by the examples of a test; each example is its own batch."""

    con: duckdb.DuckDBPyConnection
    root: Path
    fluids: Path
    n: int = 0


@pytest.fixture(scope="module")
def env():
    base = Path(tempfile.mkdtemp(prefix="fluidledger-fuzz-"))
    root = base / "raw"
    root.mkdir()
    (root / "fluids.toml").write_text(FLUIDS_TOML, encoding="utf-8")
    con = duckdb.connect(":memory:")
    migrate(con)
    yield Env(con, root, root / "fluids.toml")
    con.close()
    shutil.rmtree(base, ignore_errors=True)


def data_lines(data: bytes, encoding: str = "utf-8") -> int:
    """Data lines of a CSV file: lines after the header that are not blank (the oracle)."""
    text = data.removeprefix(b"\xef\xbb\xbf").decode(encoding)
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    return sum(1 for line in lines[1:] if line.rstrip("\r"))


def ingest(env: Env, manifest: bytes, files: dict[str, bytes]):
    """Ingest one new batch folder; check the store-wide invariants; return (batch, name)."""
    env.n += 1
    name = f"case-{env.n:05d}"
    folder = env.root / name
    folder.mkdir()
    (folder / "batch.toml").write_bytes(manifest)
    for fname, data in files.items():
        (folder / fname).write_bytes(data)
    try:
        result = run_ingest(env.con, [folder], fluids_file=env.fluids)   # must never raise
        batch = result.batches[0]
        if currently_in_test_context():
            event(f"batch {batch.status}")
        files_rows = env.con.execute(
            "SELECT path, role, rows_read, rows_loaded, rows_quarantined FROM raw_file "
            "WHERE batch = ?", [name]).fetchall()
        if batch.status == "error":
            assert files_rows == [], "a refused batch left rows"
            assert f"{name}/" in batch.error, batch.error
            assert "\n" not in batch.error, batch.error
        else:
            assert batch.status == "loaded", batch
            for _, _, read, loaded, quarantined in files_rows:
                assert read == loaded + quarantined
            found = verify_store(env.con, VerifyResult(store=":memory:"), rules=INVARIANTS,
                                 read_all=False)
            assert found.ok, found.asstr()
        return batch, name, {p: r for p, *r in files_rows}
    finally:
        # retire the example so that a repeated input is not refused as a duplicate file
        env.con.execute("UPDATE raw_file SET superseded_by = 0 WHERE superseded_by IS NULL")
        shutil.rmtree(folder)


def check_table_rows(env: Env, name: str, rows: dict, data: bytes, encoding="utf-8") -> None:
    """rows_read of the table file equals its data lines; quarantine messages name the row."""
    role, read, _, _ = rows[f"{name}/vp.csv"]
    assert role == "table"
    assert read == data_lines(data, encoding)
    for row, message in env.con.execute(
            "SELECT q.row_number, q.message FROM quarantine q JOIN raw_file f USING (file_id) "
            "WHERE f.path = ?", [f"{name}/vp.csv"]).fetchall():
        assert message.startswith(f"{name}/vp.csv, row {row}"), message


@FUZZ
@given(data=st.binary(max_size=600), header=st.sampled_from([b"", b"T,p\n", b"T,p\r\n"]),
       encoding=st.sampled_from(["utf-8", "latin-1"]))
def test_random_bytes_as_csv(env, data, header, encoding):
    """Random bytes as a CSV file are loaded, quarantined or refused -- never a crash."""
    content = header + data
    batch, name, rows = ingest(env, MANIFEST.format(encoding=encoding).encode(),
                               {"vp.csv": content})
    if batch.status == "loaded":
        check_table_rows(env, name, rows, content, encoding)


@st.composite
def corrupted_tables(draw):
    """Valid rows of distinct temperatures, then random corruptions; returns the file and
    what the uncorrupted rows must become."""
    n = draw(st.integers(1, 20))
    steps = draw(st.lists(st.integers(1, 50_000), min_size=n, max_size=n))
    temps = [20.0 + sum(steps[:i + 1]) / 537.0 for i in range(n)]    # distinct, 20..1882 K
    pressures = draw(st.lists(st.floats(1e-3, 1e6), min_size=n, max_size=n))
    rows = [[repr(t), repr(p)] for t, p in zip(temps, pressures)]
    touched: set[int] = set()
    quotes = False
    blank_before: dict[int, int] = {}
    ops = ["garbage", "delete", "extra", "quote", "wrap", "unicode", "huge", "nan", "empty",
           "blank-line", "duplicate", "delimiter"]
    for op, i, j, junk in draw(st.lists(st.tuples(st.sampled_from(ops), st.integers(0, n - 1),
                                                  st.integers(0, 1), GARBAGE), max_size=6)):
        cells = rows[i]
        j = min(j, len(cells) - 1) if cells else 0
        quotes |= '"' in junk
        if op == "blank-line":
            blank_before[i] = blank_before.get(i, 0) + 1
            continue
        if op == "wrap" and cells:
            quotes |= '"' in cells[j]
            cells[j] = f'"{cells[j]}"'            # a valid quoted cell: the row must still load
            continue
        if op == "duplicate":
            rows.append(list(cells))
            touched.add(len(rows) - 1)
            continue
        touched.add(i)
        if op == "garbage" and cells:
            cells[j] = junk
        elif op == "delete" and cells:
            del cells[j]
        elif op == "extra":
            cells.append(junk)
        elif op == "quote" and cells:
            cells[j] = cells[j][:1] + '"' + cells[j][1:]
            quotes = True
        elif op == "unicode" and cells:
            cells[j] += draw(st.sampled_from(["\u00b0", "\u2212", "\u00a0", "\u4e00", "\U0001f600"]))
        elif op == "huge" and cells:
            cells[j] = draw(st.sampled_from(["1e308", "1e309", "-1e309", "9" * 320]))
        elif op == "nan" and cells:
            cells[j] = draw(st.sampled_from(["NaN", "nan", "inf", "-Infinity"]))
        elif op == "empty" and cells:
            cells[j] = ""
        elif op == "delimiter":
            cells.insert(j, "")
    eol = draw(st.sampled_from(["\n", "\r\n"]))
    lines, expect = [], {}
    for i, cells in enumerate(rows):
        lines += [""] * blank_before.get(i, 0)
        lines.append(",".join(cells))
        if i not in touched and i < n:
            expect[len(lines)] = (temps[i], pressures[i] * 1000.0)   # row number -> T_K, p_Pa
    text = "T,p" + eol + eol.join(lines) + (eol if draw(st.booleans()) else "")
    bom = b"\xef\xbb\xbf" if draw(st.booleans()) else b""
    return bom + text.encode("utf-8"), expect, quotes


@FUZZ
@given(table=corrupted_tables())
def test_corrupted_rows_are_quarantined_and_the_rest_load(env, table):
    """Corrupted rows go to quarantine; untouched rows load with exactly the values written."""
    content, expect, quotes = table
    batch, name, rows = ingest(env, MANIFEST.format(encoding="utf-8").encode(), {"vp.csv": content})
    if batch.status == "error":
        # only an unbalanced quote, or rows all corrupted to blank lines, refuse the whole file
        assert quotes or data_lines(content) == 0, batch.error
        return
    check_table_rows(env, name, rows, content)
    if quotes:
        return
    got = dict(((r, q), (T, v)) for r, q, T, v in env.con.execute(
        "SELECT o.row_number, o.quantity, o.T_K, o.value_si FROM observation o "
        "JOIN raw_file f USING (file_id) WHERE f.path = ?", [f"{name}/vp.csv"]).fetchall())
    for row, (T, p) in expect.items():
        assert (row, "pressure") in got, (row, content)
        T_got, p_got = got[(row, "pressure")]
        assert math.isclose(T_got, T, rel_tol=1e-12) and math.isclose(p_got, p, rel_tol=1e-12)


@FUZZ
@given(text=st.one_of(st.text(max_size=400), st.binary(max_size=400).map(
    lambda b: b.decode("latin-1"))))
def test_random_text_as_batch_toml(env, text):
    """Random text as batch.toml is refused with a message naming batch.toml, never a crash."""
    batch, name, _ = ingest(env, text.encode("utf-8", "surrogatepass"), {"vp.csv": VALID_CSV})
    assert batch.status == "error"
    assert f"{name}/batch.toml" in batch.error


def _paths(doc, prefix=()):
    """Every (path, value) inside a nested dict/list document."""
    yield prefix, doc
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, prefix + (k,))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _paths(v, prefix + (i,))


@st.composite
def mutated_manifests(draw):
    """The valid batch.toml with a few structural mutations, maybe then a few text mutations."""
    doc = copy.deepcopy(VALID_DOC)
    for _ in range(draw(st.sampled_from([1, 1, 2, 3]))):
        paths = [p for p, _ in _paths(doc) if p]
        if not paths:
            break
        path = draw(st.sampled_from(paths))
        parent = doc
        for part in path[:-1]:
            parent = parent[part]
        op = draw(st.sampled_from(["delete", "replace", "add", "hostile", "plausible",
                                   "same-type", "same-type", "same-type"]))
        if op == "delete":
            del parent[path[-1]]
        elif op == "replace":
            parent[path[-1]] = draw(TOML_VALUE)
        elif op == "hostile":
            parent[path[-1]] = draw(st.sampled_from(HOSTILE))
        elif op == "plausible":
            parent[path[-1]] = draw(PLAUSIBLE)
        elif op == "same-type":   # keeps the schema's types, so deeper checks get exercised
            old = parent[path[-1]]
            if isinstance(old, str):
                parent[path[-1]] = draw(PLAUSIBLE_TEXT)
            elif isinstance(old, bool):
                parent[path[-1]] = not old
            elif isinstance(old, (int, float)):
                parent[path[-1]] = draw(st.one_of(st.floats(-1e4, 1e4), st.sampled_from(
                    [0, 1, 2, -1, 1e308, 5e-324, float("nan"), float("inf")])))
            elif isinstance(old, list) and old:
                parent[path[-1]] = old + [copy.deepcopy(old[0])]   # e.g. a second table
        elif isinstance(parent, dict):
            parent[draw(st.sampled_from(HOSTILE + ["extra", "unit", "scale"]))] = draw(TOML_VALUE)
    try:
        text = tomlkit.dumps(doc)
    except Exception:  # noqa: BLE001 - tomlkit refuses some documents (e.g. odd keys): no example
        assume(False)
    data = text.encode("utf-8", "surrogatepass")
    for _ in range(draw(st.sampled_from([0, 0, 0, 1, 2]))):
        at = draw(st.integers(0, len(data)))
        cut = draw(st.integers(0, 12))
        data = data[:at] + draw(st.binary(max_size=6)) + data[at + cut:]
    return data


@FUZZ
@given(manifest=mutated_manifests())
def test_mutated_batch_toml(env, manifest):
    """A mutated batch.toml loads consistently or is refused naming a file, never a crash."""
    batch, name, rows = ingest(env, manifest, {"vp.csv": VALID_CSV})
    if batch.status == "loaded":
        if f"{name}/vp.csv" in rows:
            assert rows[f"{name}/vp.csv"][1] == data_lines(VALID_CSV)
        assert rows[f"{name}/batch.toml"][0] == "manifest"


def test_valid_seed_document_loads(env):
    """The mutation seed itself loads every row and entry, so mutations start from a valid batch."""
    batch, name, rows = ingest(env, tomlkit.dumps(VALID_DOC).encode(), {"vp.csv": VALID_CSV})
    assert batch.status == "loaded", batch.error
    assert rows[f"{name}/vp.csv"][1:] == [3, 3, 0]
    assert rows[f"{name}/batch.toml"][1:] == [2, 2, 0]


# unit -> (to SI from the unit, from SI to the unit), for the generated-batch oracle
T_UNITS = {"K": (lambda x: x, lambda T: T), "degC": (lambda x: x + 273.15, lambda T: T - 273.15),
           "degF": (lambda x: (x - 32) * 5 / 9 + 273.15, lambda T: (T - 273.15) * 9 / 5 + 32),
           "degR": (lambda x: x * 5 / 9, lambda T: T * 9 / 5)}
P_UNITS = {"Pa": 1.0, "hPa": 100.0, "kPa": 1e3, "MPa": 1e6, "bar": 1e5, "mbar": 100.0,
           "atm": 101325.0, "torr": 101325.0 / 760, "mmHg": 133.322387415,
           "psi": 0.45359237 * 9.80665 / 0.0254 ** 2}


@st.composite
def generated_batches(draw):
    """A well-formed batch with random dialect, units, reference and formatting, plus the
    SI values its good rows must load as; sometimes one declaration is wrong on purpose."""
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    decimal = draw(st.sampled_from([".", ","])) if delimiter != "," else "."
    t_unit = draw(st.sampled_from(sorted(T_UNITS)))
    p_unit = draw(st.sampled_from(sorted(P_UNITS)))
    gauge = draw(st.booleans())
    ambient = draw(st.floats(0.5, 2.0)) if gauge else 0.0        # [bar]
    wrong = draw(st.sampled_from([None] * 8 + ["t-unit", "p-unit", "scale"]))
    n = draw(st.integers(1, 15))
    steps = draw(st.lists(st.integers(1, 10_000), min_size=n, max_size=n))
    temps = [60.0 + sum(steps[:i + 1]) / 97.0 for i in range(n)]          # distinct [K]
    pressures = draw(st.lists(st.floats(1.0, 1e8), min_size=n, max_size=n))  # [Pa]
    garbled = set(draw(st.lists(st.integers(0, n - 1), max_size=3)))
    extra = draw(st.booleans())

    def text(x: float) -> str:
        return repr(float(x)).replace(".", decimal) if decimal == "," else repr(float(x))

    header = ["T", "p"] + (["note"] if extra else [])
    lines, expect = [delimiter.join(header)], {}
    for i, (T, p) in enumerate(zip(temps, pressures)):
        p_written = (p / P_UNITS[p_unit]) if not gauge else (p / P_UNITS[p_unit])
        cells = [text(T_UNITS[t_unit][1](T)), text(p_written)]
        if i in garbled:
            cells[draw(st.integers(0, 1))] = draw(st.sampled_from(["x", "", "NaN", "1e309", "-1e9"]))
        else:
            T_si = T_UNITS[t_unit][0](float(cells[0].replace(",", ".")))
            p_si = float(cells[1].replace(",", ".")) * P_UNITS[p_unit] + ambient * 1e5
            expect[i + 1] = (T_si, p_si)
        if extra:
            cells.append(draw(st.sampled_from(["ok", "r\u00e9f", "1 2", ""])))
        lines.append(delimiter.join(cells))
    t_decl, p_decl = t_unit, p_unit
    scale = ""
    if wrong == "t-unit":
        t_decl = "bar"
    elif wrong == "p-unit":
        p_decl = draw(st.sampled_from(["K", "kpa", "kilopascal-ish", "mol/L"]))
    elif wrong == "scale":
        scale = ', scale = "IPTS-48"'
    reference = (f', reference = "gauge", ambient = {{ value = {ambient!r}, unit = "bar" }}'
                 if gauge else "")
    manifest = MANIFEST.format(encoding="utf-8").replace(
        'temperature = { column = "T", unit = "K" }',
        f'temperature = {{ column = "T", unit = "{t_decl}"{scale} }}').replace(
        'pressure = { column = "p", unit = "kPa" }',
        f'pressure = {{ column = "p", unit = "{p_decl}"{reference} }}').replace(
        'encoding = "utf-8"', f'encoding = "utf-8"\ndelimiter = "{delimiter}"\n'
        f'decimal = "{decimal}"' + ('\nextra_columns = "ignore"' if extra else ""))
    eol = draw(st.sampled_from(["\n", "\r\n"]))
    return manifest.encode(), (eol.join(lines) + eol).encode(), expect, wrong


@FUZZ
@given(generated=generated_batches())
def test_generated_batches_load_exactly(env, generated):
    """Well-formed batches in any dialect and unit load their good rows with the right SI values."""
    manifest, content, expect, wrong = generated
    batch, name, rows = ingest(env, manifest, {"vp.csv": content})
    if wrong is not None:
        assert batch.status == "error"
        assert f"{name}/batch.toml, key 'table[0].{'pressure' if wrong == 'p-unit' else 'temperature'}" \
            in batch.error, batch.error
        return
    assert batch.status == "loaded", batch.error
    check_table_rows(env, name, rows, content)
    got = dict(env.con.execute(
        "SELECT o.row_number, [o.T_K, o.value_si] FROM observation o JOIN raw_file f "
        "USING (file_id) WHERE f.path = ?", [f"{name}/vp.csv"]).fetchall())
    assert sorted(got) == sorted(expect)
    for row, (T, p) in expect.items():
        assert math.isclose(got[row][0], T, rel_tol=1e-9), (row, got[row], T)
        assert math.isclose(got[row][1], p, rel_tol=1e-9), (row, got[row], p)
