"""The Python API of releases (pipeline.open_release): it gives the numbers the SQL macros of
the published file give, NaN where they give NULL, provenance down to raw rows and workbook
cells, reads only published files, and the README's Python example runs as written."""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
import time
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pytest

from pipeline import open_release
from pipeline.api import CURVE_KINDS, ReleaseError
from pipeline.cli import main

REPO = Path(__file__).resolve().parents[2]
RTOL = 1e-12          # same expression, same floating-point operations
RTOL_INVERSE = 1e-10  # same grid and bisection; last-bit differences in the bracketing
RIG_C = "brackenridge-rig-c-nitrogen-2026-01/nitrogen-rig-c-campaign.xlsx"


@pytest.fixture(scope="module")
def release(published_demo):
    return open_release(path=published_demo["out"])


@pytest.fixture(scope="module")
def sql(published_demo):
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    yield con
    con.close()


def _nan(values) -> np.ndarray:
    return np.array([np.nan if v is None else v for v in values], dtype=float)


# --------------------------------------------------------------------------- API == SQL
def test_every_curve_evaluates_as_the_sql_macro_does(release, sql):
    """For every curve of the demo release, on a grid running 5 K past both ends, the API value
    equals fl_curve_value and is NaN exactly where the macro returns NULL."""
    curves = release.curves()
    assert len(curves) >= 20
    for row in curves.itertuples():
        curve = release.curve(row.fluid_id, next(k for k, v in CURVE_KINDS.items()
                                                 if v == (row.boundary, row.quantity)),
                              phase=row.solid_phase)
        T = np.concatenate([np.linspace(row.T_min_K - 5, row.T_max_K + 5, 23),
                            [row.T_min_K, row.T_max_K]])
        want = _nan(v for (v,) in sql.execute(
            "SELECT fl_curve_value(?, ?, ?, ?, t) FROM unnest(?::DOUBLE[]) u(t)",
            [row.fluid_id, row.boundary, row.solid_phase, row.quantity, list(T)]).fetchall())
        got = curve(T)
        assert np.array_equal(np.isnan(got), np.isnan(want)), row.value_id
        assert np.isnan(got[[0, 22]]).all() and np.isfinite(got[-2:]).all(), row.value_id
        np.testing.assert_allclose(got, want, rtol=RTOL, err_msg=row.value_id)


@pytest.mark.parametrize("kind", sorted(CURVE_KINDS))
def test_named_curves_match_the_named_macros(release, sql, kind):
    """release.curve(fluid, kind) equals the macro fl_<kind> for every fluid and phase."""
    boundary, quantity = CURVE_KINDS[kind]
    rows = sql.execute("SELECT fluid_id, solid_phase, T_min_K, T_max_K FROM curated_curves "
                       "WHERE boundary = ? AND quantity = ?", [boundary, quantity]).fetchall()
    assert rows
    for fluid, phase, lo, hi in rows:
        T = 0.25 * lo + 0.75 * hi
        args = [fluid, T] + ([phase] if boundary != "liquid-vapour" else [])
        (want,) = sql.execute(f"SELECT fl_{kind}({', '.join('?' * len(args))})", args).fetchone()
        assert release.curve(fluid, kind, phase=phase)(T) == pytest.approx(want, rel=RTOL)


def test_inverse_matches_the_sql_inverse(release, sql):
    """curve.inverse(y) equals fl_curve_inverse for values inside every curve's range, and is
    NaN where the SQL returns NULL (a value the curve never takes)."""
    for row in release.curves().itertuples():
        kind = next(k for k, v in CURVE_KINDS.items() if v == (row.boundary, row.quantity))
        curve = release.curve(row.fluid_id, kind, phase=row.solid_phase)
        targets = list(curve(np.linspace(row.T_min_K, row.T_max_K, 6)[1:-1])) + [-1.0]
        for y in targets:
            (want,) = sql.execute("SELECT fl_curve_inverse(?, ?, ?, ?, ?)", [
                row.fluid_id, row.boundary, row.solid_phase, row.quantity, y]).fetchone()
            got = curve.inverse(y)
            if want is None:
                assert np.isnan(got), (row.value_id, y)
            else:
                assert got == pytest.approx(want, rel=RTOL_INVERSE), (row.value_id, y)
    (t_nb,) = sql.execute("SELECT fl_saturation_temperature('argon', 101325.0)").fetchone()
    assert release.curve("argon").inverse(101325.0) == pytest.approx(t_nb, rel=RTOL_INVERSE)


def test_constants_and_curves_equal_the_curated_views(release, sql, published_demo):
    """constants() and curves() hold the rows of curated_constants and curated_curves; with
    arrow=True the same rows come as a pyarrow Table."""
    want = sql.execute("SELECT value_id, value_si, u_si, unit FROM curated_constants "
                       "ORDER BY value_id").fetchall()
    got = release.constants()[["value_id", "value_si", "u_si", "unit"]]
    assert [(a, b, None if c != c else c, d) for a, b, c, d in got.itertuples(index=False)] == want
    table = release.curves(arrow=True)
    assert isinstance(table, pa.Table)
    assert table.column("value_id").to_pylist() == [r[0] for r in sql.execute(
        "SELECT value_id FROM curated_curves ORDER BY value_id").fetchall()]
    assert release.release_id == published_demo["release"]
    argon_tc = release.constant("argon", "Tc")
    assert (argon_tc.value, argon_tc.unit) == (150.687, "K")   # Tegeler, Span & Wagner (1999)


def test_uncertainty_is_the_covariance_propagated_through_the_form(release, sql):
    """curve.u(T) equals sqrt(J C J^T) with J by central differences of the SQL form
    (fl_form_value) and C the released covariance; NaN outside the range."""
    row = release.curves("argon").query("quantity == 'pressure' and boundary == "
                                        "'liquid-vapour'").iloc[0]
    curve = release.curve("argon")
    params, cov = np.array(row.params), np.array([list(r) for r in row.covariance])
    T = 110.0
    J = []
    for i, p in enumerate(params):
        h = 1e-6 * max(abs(p), 1e-3)
        values = []
        for step in (h, -h):
            q = params.copy()
            q[i] += step
            values.append(sql.execute("SELECT fl_form_value(?, ?, ?, ?, ?)", [
                row.form, list(q), list(row.exponents), row.T_ref_K, T]).fetchone()[0])
        J.append((values[0] - values[1]) / (2 * h))
    J = np.array(J)
    assert curve.u(T) == pytest.approx(np.sqrt(J @ cov @ J), rel=1e-5)
    assert 0 < curve.u(T) < 1e-3 * curve(T)
    assert np.isnan(curve.u(row.T_max_K + 1.0))
    # the saturation temperature at one atmosphere: 87.302 K (Tegeler, Span & Wagner 1999)
    assert curve.inverse(101325.0) == pytest.approx(87.302, abs=0.01)


def test_unknown_curves_and_values_name_what_exists(release):
    """Asking for a curve kind, curve or value the release lacks raises ReleaseError listing
    what there is."""
    with pytest.raises(ReleaseError, match="unknown curve kind 'boiling'; valid: vapour_pressure"):
        release.curve("argon", "boiling")
    with pytest.raises(ReleaseError, match=r"no melting_pressure curve for 'argon' phase 'Ih' "
                                           r"\(it has: \['argon/curve:liquid-vapour/pressure'"):
        release.curve("argon", "melting_pressure", phase="Ih")
    with pytest.raises(ReleaseError, match="has no constant 'Tx' for 'argon'"):
        release.constant("argon", "Tx")
    with pytest.raises(ReleaseError, match="has no value 'argon/none'"):
        release.provenance("argon/none")


# --------------------------------------------------------------------------- provenance
def test_provenance_reaches_workbook_cells_fit_and_checks(release, sql, published_demo):
    """The nitrogen vapour-pressure provenance lists each rig C workbook row used by the fit
    with its cell (VLE!D4 ...), skips the two quarantined rows, names the fit and the checks
    of the run bearing on the curve, as curated_provenance holds them."""
    curve = release.curve("nitrogen")
    prov = release.provenance(curve)
    derived = prov[prov.relation == "wasDerivedFrom"]
    rig_c = derived[derived.file_path == RIG_C + "#VLE"]
    assert len(rig_c) == 17 and rig_c.used.all()
    assert {10, 15}.isdisjoint(set(rig_c.row_number))
    assert list(rig_c.cell) == [f"VLE!D{3 + r}" for r in rig_c.row_number]
    with duckdb.connect(str(published_demo["store"]), read_only=True) as store:
        cells = dict(store.execute("SELECT obs_id, value_cell_ref FROM observation WHERE "
                                   "list_contains(?, obs_id)",
                                   [[int(o) for o in rig_c.obs_id]]).fetchall())
    assert [cells[o] for o in rig_c.obs_id] == list(rig_c.cell)
    assert derived[~derived.file_path.str.contains("#", na=False)].cell.isna().all()
    (generated,) = prov[prov.relation == "wasGeneratedBy"].itertuples()
    assert generated.fit_id == curve.fit_id and "fluidledger fit run" in generated.note
    checks = prov[prov.relation == "check"]
    (record,) = sql.execute("SELECT checks FROM curated_provenance WHERE value_id = ?",
                            [curve.value_id]).fetchone()
    assert sorted(zip(checks.check_id, checks.subject, checks.status)) == sorted(
        (c["check_id"], c["subject"], c["status"]) for c in record)
    assert ("data.outliers", "curve:liquid-vapour") in set(zip(checks.check_id, checks.subject))
    sources = prov[prov.relation == "wasAttributedTo"]
    assert "brackenridge-rig-c-nitrogen-2026-01" in set(sources.source_id)
    assert isinstance(release.provenance(curve.value_id, arrow=True), pa.Table)


def test_density_provenance_names_cells_inside_the_range(release):
    """The rig C Densities sheet (range B2:D15) gives cells C3..C15 for the liquid density."""
    prov = release.provenance(release.curve("nitrogen", "saturated_liquid_density"))
    rig_c = prov[prov.file_path == RIG_C + "#Densities!B2:D15"]
    assert list(rig_c.cell) == [f"Densities!C{r}" for r in range(3, 16)]


def test_constant_provenance_names_the_fixed_point_entry(release):
    """Argon Tc derives from the [[fixed_point]] entry of its batch.toml, row = entry number."""
    prov = release.provenance(release.constant("argon", "Tc"))
    (fp,) = prov[(prov.relation == "wasDerivedFrom")].itertuples()
    assert fp.entity == "fixed_point" and fp.file_path.endswith("/batch.toml")
    assert fp.row_number >= 1 and fp.value_si == 150.687 and fp.cell is None


# --------------------------------------------------------------------------- reading
def test_named_releases_come_from_their_verified_folders(demo_store, tmp_path):
    """After a second publish the first release opens by name from its export folder (with
    the same values), the object opened before keeps working, and a changed export file is
    refused."""
    out = tmp_path / "out"
    assert main(["publish", "--store", str(demo_store), "--out", str(out), "--allow-failures",
                 "-q"]) == 0
    first = open_release(path=out)
    assert main(["publish", "--store", str(demo_store), "--out", str(out), "--allow-failures",
                 "--release", "second", "-q"]) == 0
    assert open_release(path=out / "published.duckdb").release_id == "second"
    again = open_release(first.release_id, path=out)
    assert again.release_id == first.release_id and again.origin == str(out / first.release_id)
    assert again.constants().equals(first.constants())
    T = np.linspace(80, 150, 8)
    np.testing.assert_array_equal(again.curve("argon")(T), first.curve("argon")(T))
    assert again.provenance(again.curve("nitrogen")).equals(first.provenance(first.curve("nitrogen")))
    with pytest.raises(ReleaseError, match="no such release"):
        open_release("third", path=out)
    target = out / first.release_id / "constants.parquet"
    target.chmod(0o644)
    target.write_bytes(target.read_bytes() + b"\0")
    with pytest.raises(ReleaseError, match="constants.parquet is missing or differs from "
                                           "manifest.json"):
        open_release(first.release_id, path=out)


def test_opening_a_release_needs_no_store_and_waits_for_no_writer(published_demo, tmp_path):
    """open_release reads only the published file: it works while another process holds the
    working store's write lock, and it holds no lock itself once it returns."""
    store = tmp_path / "copy.duckdb"
    shutil.copyfile(published_demo["store"], store)
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys, time; from pipeline.store import open_store\n"
         f"s = open_store({str(store)!r}); print('locked', flush=True); time.sleep(60)"],
        stdout=subprocess.PIPE, text=True, cwd=REPO)
    try:
        assert holder.stdout.readline().strip() == "locked"
        t0 = time.perf_counter()
        rel = open_release(path=published_demo["out"])
        assert rel.release_id == published_demo["release"] and time.perf_counter() - t0 < 30
    finally:
        holder.kill()
        holder.wait()
    writer = duckdb.connect(str(tmp_path / "w.duckdb"))
    shutil.copyfile(published_demo["file"], tmp_path / "p.duckdb")
    rel = open_release(path=tmp_path / "p.duckdb")
    duckdb.connect(str(tmp_path / "p.duckdb")).close()   # a writer can open it at once
    writer.close()
    assert rel.curve("argon")(100.0) > 0


def test_import_pipeline_stays_cheap():
    """`import pipeline` loads neither the API nor pandas; open_release is imported on use."""
    code = ("import sys, pipeline; print('pipeline.api' in sys.modules, 'pandas' in sys.modules); "
            "from pipeline import open_release; print('pipeline.api' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO,
                         check=True).stdout.split()
    assert out == ["False", "False", "True"]


def test_readme_python_example_runs_as_written(published_demo, monkeypatch, capsys):
    """Every ```python block of README.md runs against the demo release (the published file
    beside the store named by $FLUIDLEDGER_STORE)."""
    blocks = re.findall(r"```python\n(.*?)```", (REPO / "README.md").read_text("utf-8"), re.S)
    assert blocks and "open_release" in blocks[0]
    monkeypatch.setenv("FLUIDLEDGER_STORE", str(published_demo["out"] / "fluidledger.duckdb"))
    for i, block in enumerate(blocks):
        exec(compile(block, f"README.md python block {i + 1}", "exec"), {"__name__": "readme"})
    printed = capsys.readouterr().out
    assert published_demo["release"] in printed and "VLE!D4" in printed
