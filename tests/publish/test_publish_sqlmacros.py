"""SQL macros: every form has SQL, macros agree with the Python curves from a fresh duckdb
process that never imports the package, out-of-range gives NULL, older clients open the file."""

from __future__ import annotations

import json
import os
import shutil
import stat
import subprocess
import sys
from datetime import datetime
from pathlib import Path

import duckdb
import numpy as np
import pytest

from pipeline.correlations import FORMS, REFERENCE_CURVES, Curve, fit_curve
from pipeline.publish import published, sqlmacros

RTOL = 1e-10

# form family -> (reference curve whose values it is fitted to: fluid, boundary, quantity, phase)
SAMPLE_CURVE = {
    ("pressure", "critical"): ("water", "liquid-vapour", "pressure", ""),
    ("pressure", None): ("argon", "liquid-vapour", "pressure", ""),
    ("density", "critical"): ("water", "liquid-vapour", "rho_liquid", ""),
    ("pressure", "triple", True): ("water", "solid-vapour", "pressure", "Ih"),
    ("pressure", "triple", False): ("argon", "solid-liquid", "pressure", ""),
}


def _fitted(name: str) -> tuple[Curve, tuple[str, str, str, str]]:
    """A curve of form ``name`` fitted to a published equation of the same kind of boundary."""
    form = FORMS[name]
    key = (form.quantity, form.reference_point) + (
        (form.increasing,) if form.reference_point == "triple" else ())
    ref_key = SAMPLE_CURVE[key]
    ref = REFERENCE_CURVES[ref_key]
    T = np.linspace(ref.T_min_K, ref.T_max_K if ref.T_max_K < 1e4 else ref.T_min_K * 2, 40)
    y = ref.value(T)
    out = fit_curve([name], T, y, 1e-4 * np.abs(y), 0.0,
                    {"T_ref_K": ref.ref["T_ref_K"] or float(T.max())}, outlier_z=1e9)
    assert out.curve is not None, f"{name}: {out.skipped_reason}"
    return out.curve, ref_key


def _curve_row(i: int, curve: Curve, key: tuple[str, str, str, str]) -> dict:
    fluid, boundary, quantity, phase = key
    form = curve.correlation_form
    cov = [list(r) for r in curve.covariance] if curve.covariance is not None else None
    return {"release_id": "t", "value_id": f"f{i}/curve", "curve_id": f"c{i}",
            "fluid_id": f"f{i}", "boundary": boundary, "solid_phase": phase,
            "quantity": quantity, "unit": "Pa" if quantity == "pressure" else "kg/m^3",
            "form": curve.form, "form_citation": form.citation, "link": form.link,
            "T_ref_K": curve.ref["T_ref_K"], "reference_value_si": curve.reference_value,
            "param_names": list(sqlmacros.param_names(form, len(curve.params))),
            "params": list(curve.params), "exponents": list(curve.ref["exponents"]),
            "covariance": cov, "T_min_K": curve.T_min_K, "T_max_K": curve.T_max_K,
            "n_points": 0, "n_used": 0, "n_flagged": 0, "weighted_rms": None,
            "reduced_chi2": None, "input_hash": "0" * 64, "check_status": "none"}


@pytest.fixture(scope="module")
def every_form(tmp_path_factory) -> tuple[Path, list[tuple[dict, Curve]]]:
    """A published file holding every published reference curve and a fitted curve of every
    registered form."""
    curves = [(c, k) for k, c in sorted(REFERENCE_CURVES.items()) if c.T_max_K < 1e4]
    curves += [_fitted(name) for name in sorted(FORMS)]
    rows = [(_curve_row(i, c, k), c) for i, (c, k) in enumerate(curves)]
    release = {"release_id": "t", "fingerprint": "0" * 64, "pipeline_version": "test",
               "with_failed_checks": False, "checks_failed": 0, "checks_errored": 0,
               "checks_warned": 0, "n_constants": 0, "n_curves": len(rows), "n_provenance": 0,
               "policy_sha256": "0" * 64, "policy_json": "{}", "decisions_json": "{}"}
    tables = {"release": [release], "constants": [], "curves": [r for r, _ in rows],
              "provenance": []}
    target = tmp_path_factory.mktemp("forms") / "published.duckdb"
    now = datetime(2026, 1, 1)
    tmp = published.build_published_file(
        target, tables, {"check_run_id": "check-x", "created_at": now, "publish_run_id": "p"},
        {"release_id": "t", "published_at": now, "publish_run_id": "p", "export_dir": "-"})
    published.swap_in(tmp, target)
    return target, rows


FRESH = r"""
import json, sys
import duckdb
job = json.load(sys.stdin)
con = duckdb.connect(job["file"], read_only=True)
out = {"values": [], "inverse": [], "null": []}
for fluid, boundary, phase, quantity, temps in job["values"]:
    out["values"].append([r[0] for r in con.execute(
        "SELECT fl_curve_value(?, ?, ?, ?, t) FROM unnest(?) WITH ORDINALITY u(t, i) ORDER BY i",
        [fluid, boundary, phase, quantity, temps]).fetchall()])
for fluid, boundary, phase, quantity, ys in job["inverse"]:
    out["inverse"].append([r[0] for r in con.execute(
        "SELECT fl_curve_inverse(?, ?, ?, ?, y) FROM unnest(?) WITH ORDINALITY u(y, i) ORDER BY i",
        [fluid, boundary, phase, quantity, ys]).fetchall()])
for sql in job["null"]:
    out["null"].append(con.execute(sql).fetchone()[0])
out["imported_pipeline"] = any(m == "pipeline" or m.startswith("pipeline.") for m in sys.modules)
print(json.dumps(out))
"""


def _fresh(job: dict, cwd: Path) -> dict:
    """Run the job in a new interpreter (isolated mode: no project path, no site customisation
    from the environment) that only imports duckdb."""
    proc = subprocess.run([sys.executable, "-I", "-c", FRESH], input=json.dumps(job), text=True,
                          capture_output=True, cwd=cwd, timeout=120, check=True)
    return json.loads(proc.stdout)


def test_every_registered_form_has_an_sql_expression():
    """form_sql covers the whole registry and each expression uses only the macro's names."""
    for name, form in FORMS.items():
        sql = sqlmacros.form_sql(form)
        assert "t_k" in sql and "p_list[1]" in sql, name


def test_macros_agree_with_python_curves_from_a_fresh_process(every_form, tmp_path):
    """fl_curve_value and fl_curve_inverse in a process that never imports pipeline agree with
    Curve.value and Curve.inverse to 1e-10 relative, for every form."""
    target, rows = every_form
    values, inverse, expected_v, expected_t = [], [], [], []
    for row, curve in rows:
        T = np.linspace(curve.T_min_K, curve.T_max_K, 17)
        values.append([row["fluid_id"], row["boundary"], row["solid_phase"], row["quantity"],
                       T.tolist()])
        expected_v.append(curve.value(T))
        if curve.correlation_form.increasing:
            ys = curve.value(T[1:-1:3])
            inverse.append([row["fluid_id"], row["boundary"], row["solid_phase"],
                            row["quantity"], ys.tolist()])
            expected_t.append(curve.inverse(ys))
    got = _fresh({"file": str(target), "values": values, "inverse": inverse, "null": []},
                 tmp_path)
    assert got["imported_pipeline"] is False
    forms_checked = set()
    for (row, curve), sql, py in zip(rows, got["values"], expected_v):
        np.testing.assert_allclose(np.array(sql, float), py, rtol=RTOL, err_msg=row["form"])
        forms_checked.add(row["form"])
    assert forms_checked == set(FORMS)
    assert len(got["inverse"]) >= 8
    for sql, py in zip(got["inverse"], expected_t):
        np.testing.assert_allclose(np.array(sql, float), py, rtol=RTOL)


def test_out_of_range_and_unknown_curves_give_null(published_demo, tmp_path):
    """Outside a curve's validity range, for an unknown fluid or an unreachable pressure, the
    macros return NULL."""
    sqls = ["SELECT fl_vapour_pressure('argon', 160.0)",          # above T_max (Tc region)
            "SELECT fl_vapour_pressure('argon', 50.0)",           # below the triple point
            "SELECT fl_vapour_pressure('no-such-fluid', 100.0)",
            "SELECT fl_saturation_temperature('argon', 1e9)",     # above pc
            "SELECT fl_saturation_temperature('argon', -5.0)",
            "SELECT fl_melting_pressure('water', 300.0, 'Ih')",
            "SELECT fl_sublimation_pressure('argon', 90.0)",      # above Tt
            "SELECT fl_saturated_liquid_density('argon', 200.0)"]
    got = _fresh({"file": str(published_demo["file"]), "values": [], "inverse": [],
                  "null": sqls + ["SELECT fl_vapour_pressure('argon', 100.0)"]}, tmp_path)
    assert got["null"][:-1] == [None] * len(sqls)
    assert got["null"][-1] > 3e5  # argon boils at 87.3 K: about 0.32 MPa at 100 K


def test_named_macros_match_the_published_curves(published_demo):
    """fl_vapour_pressure, fl_saturation_temperature, fl_melting_pressure (per solid phase),
    fl_sublimation_pressure and the density macros evaluate the curves of the release."""
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    rows = con.execute("SELECT fluid_id, boundary, solid_phase, quantity, form, params, "
                       "exponents, T_ref_K, covariance, T_min_K, T_max_K FROM curated_curves"
                       ).fetchall()
    macro = {("liquid-vapour", "pressure"): "fl_vapour_pressure(?, ?)",
             ("liquid-vapour", "rho_liquid"): "fl_saturated_liquid_density(?, ?)",
             ("liquid-vapour", "rho_vapour"): "fl_saturated_vapour_density(?, ?)",
             ("solid-liquid", "pressure"): "fl_melting_pressure(?, ?, ?)",
             ("solid-vapour", "pressure"): "fl_sublimation_pressure(?, ?, ?)"}
    for fluid, boundary, phase, qty, form, params, exps, T_ref, cov, lo, hi in rows:
        curve = Curve(form, tuple(params), {"T_ref_K": T_ref, "exponents": tuple(exps)}, cov,
                      lo, hi)
        T = 0.5 * (lo + hi)
        args = [fluid, T] + ([phase] if boundary != "liquid-vapour" else [])
        value = con.execute(f"SELECT {macro[(boundary, qty)]}", args).fetchone()[0]
        assert value == pytest.approx(curve.value(T), rel=RTOL), (fluid, boundary, phase, qty)
        if (boundary, qty) == ("liquid-vapour", "pressure"):
            t_sat = con.execute("SELECT fl_saturation_temperature(?, ?)",
                                [fluid, value]).fetchone()[0]
            assert t_sat == pytest.approx(curve.inverse(value), rel=RTOL)
    assert {r[2] for r in rows if r[0] == "water" and r[1] == "solid-liquid"} == {"Ih", "III", "V"}
    con.close()


def _duckdb_cli(tmp_path: Path) -> list[str]:
    """The ``duckdb`` CLI installed from PyPI (package duckdb-cli, test extra) in this
    environment, made executable in a copy when the wheel left it without the bit."""
    exe = Path(sys.executable).parent / "duckdb"
    found = shutil.which("duckdb")
    if not exe.exists() and found:
        exe = Path(found)
    if not exe.exists():
        pytest.skip("the duckdb CLI (pip package duckdb-cli, in the test extra) is not installed")
    if exe.read_bytes()[:4] != b"\x7fELF":
        return [sys.executable, str(exe)]          # newer wheels: a Python launcher
    if not os.access(exe, os.X_OK):
        copy = tmp_path / "duckdb-cli"
        shutil.copyfile(exe, copy)
        copy.chmod(copy.stat().st_mode | stat.S_IXUSR)
        exe = copy
    return [str(exe)]


def test_an_older_duckdb_cli_opens_the_published_file(published_demo, tmp_path):
    """The published file carries the pinned storage version and the PyPI duckdb CLI (an older
    DuckDB) reads its views and evaluates its macros."""
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    tags = con.execute("SELECT tags FROM duckdb_databases() WHERE NOT internal "
                       "AND database_name = current_database()").fetchone()[0]
    expected = con.execute("SELECT fl_vapour_pressure('argon', 100.0)").fetchone()[0]
    con.close()
    assert tags["storage_version"].startswith(published.STORAGE_VERSION)
    cli = _duckdb_cli(tmp_path)
    version = subprocess.run(cli + ["-version"], capture_output=True, text=True, timeout=60,
                             check=True).stdout.strip()
    proc = subprocess.run(cli + ["-readonly", "-csv", "-noheader", str(published_demo["file"]),
                                 "-c", "SELECT fl_vapour_pressure('argon', 100.0), "
                                       "fl_saturation_temperature('argon', 101325.0), "
                                       "(SELECT count(*) FROM curated_constants);"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, (version, proc.stderr)
    p, t_nb, n = proc.stdout.strip().split(",")
    assert float(p) == pytest.approx(expected, rel=1e-12), version
    assert abs(float(t_nb) - 87.302) < 0.01 and int(n) > 30


def test_macro_arguments_are_not_captured_by_names_inside_the_macros(published_demo):
    """Arguments written as bare columns or with any table alias evaluate in the caller's scope."""
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    bare = con.execute("SELECT fluid_id, fl_vapour_pressure(fluid_id, 100.0) FROM "
                       "curated_constants GROUP BY ALL ORDER BY 1").fetchall()
    for alias in ("c", "fl_c", "cc", "x"):
        aliased = con.execute(f"SELECT {alias}.fluid_id, fl_vapour_pressure({alias}.fluid_id, "
                              f"100.0) FROM curated_constants {alias} GROUP BY ALL ORDER BY 1"
                              ).fetchall()
        assert aliased == bare
    assert dict(bare)["argon"] == con.execute(
        "SELECT fl_vapour_pressure('argon', 100.0)").fetchone()[0]
    con.close()


def test_the_published_file_documents_every_object(published_demo):
    """Every table, column, view, view column and macro of the published file has a COMMENT."""
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    missing = con.execute("""
        SELECT 'table ' || table_name FROM duckdb_tables() WHERE comment IS NULL
        UNION ALL SELECT 'view ' || view_name FROM duckdb_views()
            WHERE NOT internal AND comment IS NULL
        UNION ALL SELECT 'column ' || table_name || '.' || column_name FROM duckdb_columns()
            WHERE NOT internal AND comment IS NULL
        UNION ALL SELECT 'macro ' || function_name FROM duckdb_functions()
            WHERE function_type IN ('macro', 'table_macro') AND function_name LIKE 'fl_%'
            AND comment IS NULL
    """).fetchall()
    macros = con.execute("SELECT count(DISTINCT function_name) FROM duckdb_functions() WHERE "
                         "function_type IN ('macro', 'table_macro') AND function_name LIKE 'fl_%'"
                         ).fetchone()
    con.close()
    assert missing == [] and macros[0] == len(sqlmacros.MACRO_NAMES)


def test_the_vapour_pressure_macro_answers_at_tc(published_demo):
    """The demo's water vapour-pressure fit ends at 645 K but is anchored at Tc = 647.096 K
    (IAPWS-95) and critical.curve-end p(Tc) passes: the curve is published valid to Tc, and
    fl_vapour_pressure('water', Tc) gives the fitted pc, within 0.01 % of 22.064 MPa (issue 12)."""
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    T_max = con.execute("SELECT T_max_K FROM curated_curves WHERE fluid_id = 'water' AND "
                        "boundary = 'liquid-vapour' AND quantity = 'pressure'").fetchone()[0]
    at_tc = con.execute("SELECT fl_vapour_pressure('water', 647.096)").fetchone()[0]
    above = con.execute("SELECT fl_vapour_pressure('water', 647.2)").fetchone()[0]
    con.close()
    assert T_max == pytest.approx(647.096, abs=1e-9)
    assert at_tc == pytest.approx(22.064e6, rel=1e-4)
    assert above is None


def test_table_macros_give_the_scalar_macros_values_for_every_form(every_form):
    """fl_curve_value_table (curves joined once, coefficients as scalar columns) returns, for
    every form, exactly what fl_curve_value returns per row: the same arithmetic, NULL outside
    the range and for an unknown fluid; the caller's other columns are kept."""
    target, rows = every_form
    con = duckdb.connect(str(target), read_only=True)
    forms = set()
    for row, curve in rows:
        T = np.linspace(curve.T_min_K, curve.T_max_K, 17).tolist() + [curve.T_max_K * 1.5]
        con.execute("CREATE OR REPLACE TEMP TABLE pts AS SELECT f AS fluid_id, t AS "
                    "temperature_K, i AS tag FROM unnest(?) WITH ORDINALITY u(t, i), "
                    "unnest(?) v(f)", [T, [row["fluid_id"], "no-such-fluid"]])
        key = [row["boundary"], row["solid_phase"], row["quantity"]]
        table = con.execute("SELECT fluid_id, tag, value FROM fl_curve_value_table('pts', ?, ?, "
                            "?) ORDER BY fluid_id, tag", key).fetchall()
        scalar = con.execute("SELECT fluid_id, tag, fl_curve_value(fluid_id, ?, ?, ?, "
                             "temperature_K) FROM pts ORDER BY fluid_id, tag", key).fetchall()
        assert table == scalar, row["form"]
        assert [v for f, _, v in table if f == row["fluid_id"]][-1] is None
        assert {v for f, _, v in table if f == "no-such-fluid"} == {None}
        forms.add(row["form"])
    con.close()
    assert forms == set(FORMS)


def test_named_table_macros_match_the_named_macros(published_demo, tmp_path):
    """Each named table macro (vapour, melting per phase, sublimation, both saturated
    densities) gives the named scalar macro's value on every row, also in the PyPI duckdb CLI
    (an older DuckDB)."""
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    con.execute("CREATE TEMP TABLE pts AS SELECT c.fluid_id, c.solid_phase, c.T_min_K + "
                "(c.T_max_K - c.T_min_K) * k / 9.0 AS temperature_K, c.boundary, c.quantity, k "
                "FROM curated_curves c, range(10) r(k)")
    pairs = [("fl_vapour_pressure_table('pts')", "vapour_pressure_Pa",
              "fl_vapour_pressure(fluid_id, temperature_K)"),
             ("fl_saturated_liquid_density_table('pts')", "rho_liquid_kg_m3",
              "fl_saturated_liquid_density(fluid_id, temperature_K)"),
             ("fl_saturated_vapour_density_table('pts')", "rho_vapour_kg_m3",
              "fl_saturated_vapour_density(fluid_id, temperature_K)")]
    for phase in ("", "Ih", "III", "V"):
        pairs += [(f"fl_melting_pressure_table('pts', phase := '{phase}')", "melting_pressure_Pa",
                   f"fl_melting_pressure(fluid_id, temperature_K, phase := '{phase}')"),
                  (f"fl_sublimation_pressure_table('pts', phase := '{phase}')",
                   "sublimation_pressure_Pa",
                   f"fl_sublimation_pressure(fluid_id, temperature_K, phase := '{phase}')")]
    non_null = 0
    for table_call, column, scalar_call in pairs:
        got = con.execute(f"SELECT fluid_id, solid_phase, boundary, quantity, k, {column} FROM "
                          f"{table_call} ORDER BY ALL").fetchall()
        want = con.execute(f"SELECT fluid_id, solid_phase, boundary, quantity, k, {scalar_call} "
                           "FROM pts ORDER BY ALL").fetchall()
        assert got == want, table_call
        non_null += sum(r[-1] is not None for r in got)
    expected = con.execute("SELECT fl_vapour_pressure('argon', 100.0)").fetchone()[0]
    con.close()
    assert non_null >= 10 * 8
    cli = _duckdb_cli(tmp_path)
    proc = subprocess.run(cli + ["-readonly", "-csv", "-noheader", str(published_demo["file"]),
                                 "-c", "CREATE TEMP TABLE p AS SELECT 'argon' AS fluid_id, "
                                       "100.0 AS temperature_K; SELECT vapour_pressure_Pa FROM "
                                       "fl_vapour_pressure_table('p');"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert float(proc.stdout.strip()) == pytest.approx(expected, rel=1e-12)


def test_the_readme_table_macro_example_runs_as_written(published_demo):
    """The README's bulk-evaluation SQL block runs on the demo's published file (with a
    my_data table of argon and water points) and adds each named column."""
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    block = next(b.split("```", 1)[0] for b in readme.split("```sql")[1:]
                 if "fl_vapour_pressure_table" in b)
    con = duckdb.connect(str(published_demo["file"]), read_only=True)
    con.execute("CREATE TEMP TABLE my_data AS SELECT * FROM (VALUES ('argon', 100.0, 1), "
                "('water', 260.0, 2), ('water', 373.124, 3)) v(fluid_id, T, run)")
    code = "\n".join(line.split("--", 1)[0] for line in block.splitlines())
    statements = [s.strip() for s in code.split(";") if s.strip()]
    results = [con.execute(s).fetchdf() for s in statements]
    con.close()
    assert len(statements) == 4
    vp, melt, rho = results[1], results[2], results[3]
    # argon boils at 87.3 K, about 0.32 MPa at 100 K; water at 373.124 K: 101.325 kPa
    # (IAPWS-95 normal boiling point, common practice to quote it so)
    by_run = dict(zip(vp["run"], vp["vapour_pressure_Pa"]))
    assert by_run[1] > 3e5 and by_run[3] == pytest.approx(101325.0, rel=2e-3)
    assert melt.loc[melt["run"] == 2, "melting_pressure_Pa"].iloc[0] > 1e8   # Ih at 260 K
    assert rho["value"].notna().sum() >= 2
