"""The batch contract refuses what would be stored wrong: non-finite numbers, trailing newlines,
undeclared solid phases, comment characters that start numbers; schema errors stay short (issue 13)."""

from __future__ import annotations

import pytest

from pipeline.cli import main
from pipeline.ingest.contract import EXCERPT, Fluid, PointValue, UncertaintySpec
from pipeline.store import open_store
from tests.conftest import SIMPLE_BATCH, SIMPLE_CSV, write_batch

GOOD = SIMPLE_BATCH.format(source="rig-a")
TRIPLE = """
[[fixed_point]]
fluid = "argon"
kind = "triple"
T = {{ value = {T}, unit = "K", u = {uT} }}
p = {{ value = 68.89, unit = "kPa", u = {up} }}
"""
CONSTANT = """
[[constant]]
fluid = "argon"
name = "acentric_factor"
value = {value}
unit = "1"
u = {u}
"""


def ingest(raw_root, store_path, capsys) -> tuple[int, str, str]:
    code = main(["ingest", "--verbose", str(raw_root), "--store", str(store_path)])
    out, err = capsys.readouterr()
    return code, out, err


def rows(store_path, sql: str) -> list[tuple]:
    with open_store(store_path, read_only=True) as s:
        return s.con.execute(sql).fetchall()


@pytest.mark.parametrize("old,new,key", [
    ("temperature = { value = 0.01", "temperature = { value = nan", "uncertainty.temperature.value"),
    ("temperature = { value = 0.01", "temperature = { value = inf", "uncertainty.temperature.value"),
    ("pressure = { relative = 0.001 }", "pressure = { relative = nan }",
     "uncertainty.pressure.relative"),
    ("pressure = { relative = 0.001 }", "pressure = { relative = inf }",
     "uncertainty.pressure.relative"),
    ("pressure = { relative = 0.001 }", "pressure = { relative = 0.001, coverage = nan }",
     "uncertainty.pressure.coverage"),
])
def test_non_finite_uncertainties_refuse_only_their_batch(raw_root, store_path, capsys, old, new,
                                                          key):
    """Case 2: nan or inf in an uncertainty, relative or coverage value refuses that batch naming the key (exit 2); the batch beside it loads."""
    write_batch(raw_root, "a-good", GOOD, {"vp.csv": SIMPLE_CSV})
    write_batch(raw_root, "b-bad", GOOD.replace("rig-a", "rig-b").replace(old, new),
                {"vp.csv": SIMPLE_CSV})
    code, out, err = ingest(raw_root, store_path, capsys)
    assert code == 2, err
    assert f"b-bad/batch.toml, key 'table[0].{key}'" in err
    assert "is not a finite number" in err and "Traceback" not in err
    assert "loaded  a-good: 3 rows read, 3 loaded, 0 quarantined" in out
    assert rows(store_path, "SELECT DISTINCT batch FROM raw_file") == [("a-good",)]


@pytest.mark.parametrize("T,uT,up,key", [
    ("83.8058", "nan", "0.02", "fixed_point[0].T.u"),
    ("83.8058", "0.0002", "inf", "fixed_point[0].p.u"),
    ("nan", "0.0002", "0.02", "fixed_point[0].T.value"),
    ("inf", "0.0002", "0.02", "fixed_point[0].T.value"),
])
def test_non_finite_fixed_point_values_are_refused_not_stored(raw_root, store_path, capsys, T, uT,
                                                              up, key):
    """Case 10: u = nan or inf on a fixed point, or a NaN temperature, is refused naming the key; nothing is stored (a NaN T was quarantined as out-of-scale-range)."""
    write_batch(raw_root, "b1", GOOD + TRIPLE.format(T=T, uT=uT, up=up), {"vp.csv": SIMPLE_CSV})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and f"b1/batch.toml, key '{key}'" in err and "not a finite number" in err
    assert rows(store_path, "SELECT count(*) FROM fixed_point") == [(0,)]
    assert rows(store_path, "SELECT count(*) FROM quarantine") == [(0,)]


@pytest.mark.parametrize("value,u,key", [("-0.0022", "nan", "constant[0].u"),
                                         ("nan", "0.001", "constant[0].value"),
                                         ("-inf", "0.001", "constant[0].value")])
def test_non_finite_constants_are_refused(raw_root, store_path, capsys, value, u, key):
    """Case 10: a stated constant with a non-finite value or uncertainty is refused naming the key."""
    write_batch(raw_root, "b1", GOOD + CONSTANT.format(value=value, u=u), {"vp.csv": SIMPLE_CSV})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and f"b1/batch.toml, key '{key}'" in err
    assert rows(store_path, "SELECT count(*) FROM stated_constant") == [(0,)]


@pytest.mark.parametrize("model,fields", [
    (UncertaintySpec, {"relative": float("nan")}),
    (UncertaintySpec, {"value": float("inf"), "unit": "K"}),
    (PointValue, {"value": 83.8, "unit": "K", "u": float("nan")}),
    (Fluid, {"id": "argon", "name": "argon", "molar_mass": {"value": float("inf"),
                                                           "unit": "g/mol"}}),
])
def test_the_models_refuse_non_finite_numbers_too(model, fields):
    """Case 2/10: the pydantic models refuse NaN and infinity themselves (for callers that skip the schema)."""
    with pytest.raises(ValueError, match="finite number"):
        model.model_validate(fields)


@pytest.mark.parametrize("old,new,key", [
    ('id = "rig-a"', 'id = "rig-a\\n"', "source.id"),
    ('fluid = "argon"', 'fluid = "argon\\n"', "table[0].fluid"),
    ('file = "vp.csv"', 'file = "vp.csv\\n"', "table[0].file"),
    ('column = "p"', 'column = "p\\n"', "table[0].pressure.column"),
])
def test_a_pattern_does_not_accept_a_trailing_newline(raw_root, store_path, capsys, old, new, key):
    """Case 10: ids, file and column names ending in a newline are refused by the schema ($ is the end of the text, as in JSON Schema's ECMA regexes)."""
    write_batch(raw_root, "b1", GOOD.replace(old, new, 1), {"vp.csv": SIMPLE_CSV})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and f"b1/batch.toml, key '{key}': does not match batch.schema.json" in err


def test_a_release_name_with_a_trailing_newline_is_refused(tmp_path, capsys):
    """Case 10: `publish --release 'name\\n'` is refused like any name that is not a slug."""
    store = tmp_path / "s.duckdb"
    open_store(store).close()
    code = main(["publish", "--store", str(store), "--release", "r-1\n"])
    assert code == 2 and "must be a lower-case slug" in capsys.readouterr().err


@pytest.mark.parametrize("where,manifest", [
    ("table[0].solid_phase", GOOD.replace('boundary = "liquid-vapour"',
                                          'boundary = "solid-liquid"\nsolid_phase = "XIV"')),
    ("fixed_point[0].phases[0]", GOOD + """
[[fixed_point]]
fluid = "water"
kind = "triple"
phases = ["Ih", "IX", "liquid"]
T = { value = 251.165, unit = "K" }
p = { value = 209.9, unit = "MPa" }
"""),
    ("table[0].solid_phase", GOOD.replace('fluid = "argon"', 'fluid = "argon"\nsolid_phase = "I"')),
])
def test_undeclared_solid_phases_are_refused(raw_root, store_path, capsys, where, manifest):
    """Case 10: a solid-phase label a fluid does not declare in fluids.toml is refused naming the key."""
    write_batch(raw_root, "b1", manifest, {"vp.csv": SIMPLE_CSV})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2, err
    key = where if "phases" not in where else "fixed_point[0].phases[1]"
    assert f"key '{key}': solid phase" in err and "is not declared for fluid" in err


@pytest.mark.parametrize("comment", ["-", "+", ".", "5", ",", "e", " "])
def test_a_comment_character_that_can_start_a_number_is_refused(raw_root, store_path, capsys,
                                                                comment):
    """Case 7: a comment character that can start a number (or the header) is refused; declared '-', three rows of negative Celsius temperatures silently vanished."""
    manifest = GOOD.replace('unit = "K" }', 'unit = "degC" }', 1).replace(
        'boundary = "liquid-vapour"', f'boundary = "liquid-vapour"\ncomment = "{comment}"')
    body = "T,p\n-188.15,78.9\n-185.85,101.3\n-183.15,133.6\n5.0,1.0\n"
    write_batch(raw_root, "b1", manifest, {"vp.csv": body})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and "b1/batch.toml, key 'table[0].comment'" in err
    assert "can start a number" in err
    assert rows(store_path, "SELECT count(*) FROM observation") == [(0,)]


def test_a_comment_character_equal_to_the_delimiter_is_refused(raw_root, store_path, capsys):
    """Case 7: a comment character that is also the delimiter would cut every row; refused."""
    manifest = GOOD.replace('boundary = "liquid-vapour"',
                            'boundary = "liquid-vapour"\ndelimiter = ";"\ncomment = ";"')
    write_batch(raw_root, "b1", manifest, {"vp.csv": SIMPLE_CSV.replace(",", ";")})
    code, _, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and "key 'table[0].comment': comment character ';' is also" in err


def test_a_schema_error_quotes_a_short_excerpt_of_a_huge_value(raw_root, store_path, capsys):
    """Case 9: a 5 MB string where a number belongs gives a message of a few hundred characters, on stderr and in the run summary."""
    huge = "9" * 5_000_000
    write_batch(raw_root, "b1", GOOD.replace("value = 0.01", f'value = "{huge}"'),
                {"vp.csv": SIMPLE_CSV})
    code, out, err = ingest(raw_root, store_path, capsys)
    assert code == 2 and "key 'table[0].uncertainty.temperature" in err
    assert len(err) < 2000 and len(out) < 2000
    assert f"'{'9' * (EXCERPT - 1)}... (5,000,002 characters)" in err
    summary = rows(store_path, "SELECT summary_json FROM run WHERE kind = 'ingest'")[0][0]
    assert len(summary) < 3000


def _manifests() -> list[tuple[str, dict]]:
    """Every batch.toml of the demo, the real-data corpus and the bad-input corpus that the
    ingest parses (within its size and depth bounds), with its label."""
    from pathlib import Path

    from pipeline.errors import BatchError
    from pipeline.ingest.rawread import parse_toml

    root = Path(__file__).resolve().parents[2]
    out = []
    for folder in (root / "raw", root / "tests" / "realdata" / "corpus", root / "tests" / "bad_inputs"):
        for path in sorted(folder.rglob("batch.toml")):
            try:
                out.append((str(path.relative_to(root)), parse_toml(path.read_bytes(), "x")))
            except (BatchError, OSError):
                continue
    return out


def _mutations(doc: dict):
    """Variants of a manifest that break or keep one rule of the schema, entry by entry."""
    import copy

    for kind in ("table", "fixed_point", "constant"):
        entries = doc.get(kind)
        for i, entry in enumerate(entries if isinstance(entries, list) else []):
            if not isinstance(entry, dict):
                continue
            for key in list(entry):
                for value in (None, "x", 1, 1.5, float("nan"), [], {}, "file.xlsx",
                              "argon\n"):
                    variant = copy.deepcopy(doc)
                    if value is None:
                        del variant[kind][i][key]
                    else:
                        variant[kind][i][key] = value
                    yield variant
            variant = copy.deepcopy(doc)
            variant[kind][i]["unknown_key"] = 1
            yield variant
    variant = copy.deepcopy(doc)
    variant.pop("source", None)
    yield variant


def test_the_fast_schema_check_agrees_with_full_validation():
    """Validating each [[table]], [[fixed_point]] and [[constant]] entry alone (remembering the valid ones) accepts exactly the manifests that full JSON Schema validation accepts: every manifest of the demo and both corpora, and one-key mutations of each."""
    from pipeline.ingest.contract import _validator, is_valid

    full = _validator("batch.schema.json")
    docs = _manifests()
    assert len(docs) > 150
    checked = accepted = 0
    for n, (label, doc) in enumerate(docs):
        variants = [doc, *list(_mutations(doc))[:24]] if n % 8 == 0 else [doc]
        for variant in variants:
            want = not any(True for _ in full.iter_errors(variant))
            assert is_valid(variant, "batch.schema.json") == want, label
            assert is_valid(variant, "batch.schema.json") == want, label    # memo answers
            checked += 1
            accepted += want
    assert 0 < accepted < checked


def test_references_are_inlined_with_their_sibling_keywords():
    """A local $ref is replaced by its definition, an allOf keeping the keywords beside it; a reference elsewhere is refused."""
    from pipeline.ingest.contract import inlined

    defs = {"slug": {"type": "string", "pattern": "^[a-z]+$"}}
    assert inlined({"properties": {"id": {"$ref": "#/$defs/slug"}}}, defs) == \
        {"properties": {"id": {"type": "string", "pattern": "^[a-z]+$"}}}
    assert inlined({"$ref": "#/$defs/slug", "maxLength": 3}, defs) == \
        {"allOf": [defs["slug"]], "maxLength": 3}
    with pytest.raises(KeyError):
        inlined({"$ref": "other.json#/x"}, defs)
