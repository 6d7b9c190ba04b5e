"""Fit stage: groups fitted from the store, refit only on change, skips stated, outliers kept."""

from __future__ import annotations

import json

import numpy as np
import pytest

from pipeline.correlations import Curve
from pipeline.correlations.reference import reference_curve
from pipeline.fitting.stage import run_fit
from pipeline.ingest.stage import run_ingest
from pipeline.store import open_store
from tests.conftest import write_batch
from tests.storekit import (ARGON_CRITICAL, TEGELER_1999, batch_toml, build_store, source,
                            vp_table)


def argon_ref(source_id: str) -> str:
    """Argon's vapour pressures from its ancillary equation with its critical point."""
    return batch_toml(
        source(source_id, f"{TEGELER_1999}, ancillary equations", "evaluated"),
        [vp_table(p_unit="Pa", u_p_rel=0.0005)],
        [{**ARGON_CRITICAL, "rho": {"value": 535.6, "unit": "kg/m^3", "u": 1.0}}],
        format_version=None)


def vp_csv(T: np.ndarray, factor: np.ndarray | None = None) -> str:
    """Argon vapour pressures from the Tegeler et al. (1999) ancillary equation."""
    p = reference_curve("argon", "liquid-vapour", "pressure").value(T)
    if factor is not None:
        p = p * factor
    return "T,p\n" + "".join(f"{t:.4f},{v:.8g}\n" for t, v in zip(T, p))


def build(raw_root, store_path, csv: str, source="ref-argon"):
    write_batch(raw_root, source, argon_ref(source), {"vp.csv": csv})
    build_store(store_path, [raw_root])


def fit(store_path, **kw):
    with open_store(store_path) as s:
        return run_fit(s.con, **kw), s.con.execute(
            "SELECT fit_id, status, form, n_used, n_flagged, reduced_chi2, input_hash "
            "FROM fit WHERE is_current").fetchall()


def test_published_curve_data_is_fitted_and_recovers_the_curve(raw_root, store_path):
    """Points on the argon ancillary curve (Tegeler et al. 1999) are fitted within their u."""
    T = np.linspace(84.0, 148.0, 40)
    build(raw_root, store_path, vp_csv(T))
    result, rows = fit(store_path)
    assert [g.status for g in result.groups] == ["fitted"]
    (_, status, form, n_used, n_flagged, chi2, _), = rows
    assert status == "fitted" and n_used == 40 and n_flagged == 0
    with open_store(store_path) as s:
        z = np.array([r[0] for r in s.con.execute("SELECT z FROM fit_residual").fetchall()])
    assert np.all(np.abs(z) < 2.0)


def test_unchanged_inputs_are_not_refitted(raw_root, store_path):
    """A second fit run with the same observations refits nothing."""
    build(raw_root, store_path, vp_csv(np.linspace(84.0, 148.0, 20)))
    fit(store_path)
    again, rows_again = fit(store_path)
    assert [g.status for g in again.groups] == ["unchanged"] and not again.changed
    assert len(rows_again) == 1


def test_changed_inputs_refit_and_keep_history(raw_root, store_path):
    """New data changes the input hash: a new current fit, the old one kept as not current."""
    build(raw_root, store_path, vp_csv(np.linspace(84.0, 148.0, 20)))
    _, before = fit(store_path)
    build(raw_root, store_path, vp_csv(np.linspace(84.0, 149.0, 25)))
    result, after = fit(store_path)
    assert [g.status for g in result.groups] == ["fitted"]
    assert before[0][6] != after[0][6]
    with open_store(store_path) as s:
        assert s.con.execute("SELECT count(*) FROM fit").fetchone()[0] == 2


def test_too_few_points_is_skipped_with_a_stated_reason(raw_root, store_path):
    """A group below the minimum number of points gets a skipped fit row with its reason."""
    build(raw_root, store_path, vp_csv(np.array([85.0, 90.0, 95.0])))
    result, rows = fit(store_path)
    assert rows[0][1] == "skipped"
    assert "too few points" in result.groups[0].reason


def test_gross_outlier_is_flagged_and_kept(raw_root, store_path):
    """A point 8 % off the curve is flagged as an outlier; its residual row is kept."""
    T = np.linspace(84.0, 148.0, 30)
    factor = np.ones_like(T)
    factor[12] = 1.08
    build(raw_root, store_path, vp_csv(T, factor))
    _, rows = fit(store_path)
    assert rows[0][4] == 1
    with open_store(store_path) as s:
        flagged = s.con.execute("SELECT o.T_K FROM fit_residual r JOIN observation o USING (obs_id) "
                                "WHERE r.is_outlier").fetchall()
        n = s.con.execute("SELECT count(*) FROM fit_residual").fetchone()[0]
    assert flagged == [(pytest.approx(T[12], abs=1e-4),)] and n == 30


def test_exclusions_leave_points_out_and_name_the_decision(raw_root, store_path):
    """An excluded observation is not used, stays visible, and carries the decision id."""
    build(raw_root, store_path, vp_csv(np.linspace(84.0, 148.0, 20)))
    with open_store(store_path) as s:
        obs = s.con.execute("SELECT obs_id FROM observation ORDER BY obs_id LIMIT 1").fetchone()[0]
    _, rows = fit(store_path, exclusions={obs: "D-7"})
    with open_store(store_path) as s:
        excluded = s.con.execute("SELECT obs_id, excluded_by FROM fit_residual "
                                 "WHERE excluded_by IS NOT NULL").fetchall()
        n_excluded = s.con.execute("SELECT n_excluded, n_used FROM fit WHERE is_current").fetchone()
    assert excluded == [(obs, "D-7")] and n_excluded == (1, 19)


LAB_BATCH = batch_toml(source("lab-argon", "invented lab campaign for the test suite"),
                       [vp_table(p_unit="Pa", u_p_rel=0.002)], format_version=None)


def test_a_file_in_the_wrong_unit_is_flagged_not_fitted(raw_root, store_path):
    """A lab file 1000x low (kPa written as Pa) beside published data is flagged whole; the
    published points all stay in the fit (robust start on the most authoritative source)."""
    build(raw_root, store_path, vp_csv(np.linspace(84.0, 148.0, 30)))
    write_batch(raw_root, "lab-argon", LAB_BATCH,
                {"vp.csv": vp_csv(np.linspace(85.5, 140.5, 20), np.full(20, 1e-3))})
    build_store(store_path, [raw_root])
    result, rows = fit(store_path)
    assert result.groups[0].status == "fitted"
    with open_store(store_path) as s:
        flagged = dict(s.con.execute(
            "SELECT o.source_id, count(*) FILTER (WHERE r.is_outlier) FROM fit_residual r "
            "JOIN observation_current o USING (obs_id) JOIN fit f USING (fit_id) "
            "WHERE f.is_current GROUP BY 1").fetchall())
    assert flagged == {"ref-argon": 0, "lab-argon": 20}


def test_worker_processes_give_the_same_fits_as_one_process(tmp_path, monkeypatch):
    """The demo data fitted in two spawned worker processes and in this process: the same fit
    rows (ids, forms, parameters, statistics) and the same residual rows (common practice:
    a parallel path checked against the serial one)."""
    import shutil
    from pathlib import Path

    from pipeline.errors import FitError
    from pipeline.fitting.stage import fit_workers

    raw = Path(__file__).resolve().parents[2] / "raw"
    one, two = tmp_path / "one.duckdb", tmp_path / "two.duckdb"
    with open_store(one) as s:
        assert not run_ingest(s.con, [raw]).errors
    shutil.copyfile(one, two)
    rows = {}
    for path, workers in ((one, 1), (two, 2)):
        with open_store(path) as s:
            result = run_fit(s.con, workers=workers)
            rows[workers] = (
                s.con.execute("SELECT fit_id, status, form, params_json, covariance_json, n_used, "
                              "n_flagged, reduced_chi2, bic FROM fit ORDER BY fit_id").fetchall(),
                s.con.execute("SELECT fit_id, obs_id, residual_si, z, is_outlier FROM "
                              "fit_residual ORDER BY fit_id, obs_id").fetchall())
        assert result.count("fitted") > 10
    assert rows[1] == rows[2]
    assert fit_workers(10) == 1 and fit_workers(10, 3) == 3 and fit_workers(1, 4) == 1
    monkeypatch.setenv("FLUIDLEDGER_FIT_WORKERS", "2")
    assert fit_workers(10) == 2
    monkeypatch.setenv("FLUIDLEDGER_FIT_WORKERS", "two")
    with pytest.raises(FitError, match="whole number"):
        fit_workers(10)


ARGON_SUB_T_ONLY = batch_toml(
    source("sub-t-only", f"{TEGELER_1999}, sublimation ancillary", "literature"),
    [vp_table(file="sub.csv", boundary="solid-vapour", p_unit="Pa", u_p_rel=0.002)],
    [{"fluid": "argon", "kind": "triple", "T": {"value": 83.8058, "unit": "K"}}],
    format_version=None)


def test_a_temperature_only_triple_point_anchors_a_sublimation_fit(raw_root, store_path):
    """A triple point stated by T alone (Tt = 83.8058 K, ITS-90 argon point) anchors the
    sublimation fit, which then recovers the Tegeler et al. (1999) pt = 68.891 kPa at Tt."""
    T = np.linspace(70.0, 83.5, 12)
    p = reference_curve("argon", "solid-vapour", "pressure").value(T)
    write_batch(raw_root, "sub-t-only", ARGON_SUB_T_ONLY,
                {"sub.csv": "T,p\n" + "".join(f"{t:.4f},{v:.8g}\n" for t, v in zip(T, p))})
    with open_store(store_path) as s:
        run_ingest(s.con, [raw_root])
        assert s.con.execute("SELECT p_Pa FROM fixed_point_current").fetchone() == (None,)
        result = run_fit(s.con)
        curve_json = s.con.execute("SELECT curve_json FROM fit WHERE is_current AND "
                                   "boundary = 'solid-vapour'").fetchone()[0]
    (group,) = [g for g in result.groups if g.boundary == "solid-vapour"]
    assert group.status == "fitted", group.reason
    curve = Curve.from_dict(json.loads(curve_json))
    assert curve.ref["T_ref_K"] == pytest.approx(83.8058)
    assert curve.reference_value == pytest.approx(68.891e3, rel=1e-3)
