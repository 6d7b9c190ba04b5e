"""The fit stage's batched path writes the fits of the per-group reference path.

Each test fits the same store twice: with the batched path the stage uses
(``run_fit(path="batched")``, :func:`pipeline.correlations.batched.fit_curves`) and with the
per-group reference (``run_fit(path="per-group")``: :func:`pipeline.correlations.fit_curve` for
each group, the stage's way before issue 14), and compares every fit row and residual row:
ids, status, form, counts and outlier flags exactly; parameters, covariance, range, chi2, BIC,
weighted RMS, residuals and z to 1e-10 relative (common practice: a fast path checked against
its reference implementation).
"""

from __future__ import annotations

import importlib.util
import json
import shutil
from pathlib import Path

import pytest

from pipeline.decisions import exclusions_for_fit, load_decisions
from pipeline.fitting.stage import run_fit
from pipeline.ingest.stage import run_ingest
from pipeline.store import open_store
from tests.compare import close

ROOT = Path(__file__).resolve().parents[2]

FIT_SQL = ("SELECT fit_id, fluid_id, boundary, solid_phase, quantity, status, skipped_reason, "
           "form, curve_json, params_json, covariance_json, T_min_K, T_max_K, n_points, n_used, "
           "n_flagged, n_excluded, weighted_rms, reduced_chi2, bic, input_hash, is_current "
           "FROM fit ORDER BY fit_id")
RESIDUAL_SQL = ("SELECT fit_id, obs_id, residual_si, z, is_outlier, excluded_by FROM fit_residual "
                "ORDER BY fit_id, obs_id")


JSON_COLUMNS = (8, 9, 10)     # curve_json, params_json, covariance_json in FIT_SQL


def decoded(row: tuple) -> tuple:
    """A fit row with its JSON columns parsed, so that their numbers compare to RTOL."""
    return tuple(json.loads(v) if i in JSON_COLUMNS and v is not None else v
                 for i, v in enumerate(row))


def fit_both(store: Path, exclusions_from: Path | None = None, exclusions=None) -> dict:
    """Fit copies of ``store`` by both paths; per path the fit rows and residual rows."""
    out = {}
    for path in ("batched", "per-group"):
        copy = store.with_name(f"{path}.duckdb")
        shutil.copyfile(store, copy)
        with open_store(copy) as s:
            if exclusions_from:
                exclusions = exclusions_for_fit(s.con, load_decisions(exclusions_from))
            result = run_fit(s.con, exclusions=exclusions, path=path, workers=1)
            out[path] = (result, [decoded(r) for r in s.con.execute(FIT_SQL).fetchall()],
                         s.con.execute(RESIDUAL_SQL).fetchall())
    return out


def assert_same_fits(out: dict) -> None:
    (res_a, fits_a, resid_a), (res_b, fits_b, resid_b) = out["batched"], out["per-group"]
    assert [g.fit_id for g in res_a.groups] == [g.fit_id for g in res_b.groups]
    assert len(fits_a) == len(fits_b) and len(resid_a) == len(resid_b)
    for a, b in zip(fits_a, fits_b):
        assert close(a, b), f"fit rows differ:\n{a}\n{b}"
    bad = [(a, b) for a, b in zip(resid_a, resid_b) if not close(a, b)]
    assert not bad, f"{len(bad)} residual rows differ, first: {bad[0]}"


def ingest(raw: Path, store: Path) -> Path:
    with open_store(store) as s:
        assert not run_ingest(s.con, [raw]).errors
    return store


def test_demo_fits_are_those_of_the_reference(tmp_path):
    """The demo data (raw/), with three observations of one series excluded by a decision:
    both paths write the same fits and residuals."""
    store = ingest(ROOT / "raw", tmp_path / "demo.duckdb")
    with open_store(store, read_only=True) as s:
        ids = [r[0] for r in s.con.execute(
            "SELECT obs_id FROM observation_current WHERE quantity = 'pressure' AND "
            "boundary = 'liquid-vapour' ORDER BY fluid_id, T_K LIMIT 3").fetchall()]
    out = fit_both(store, exclusions={i: "D-test" for i in ids})
    assert out["batched"][0].count("fitted") > 10
    assert any(r[5] is not None for r in out["batched"][2])      # an excluded observation
    assert_same_fits(out)


@pytest.mark.slow
def test_real_data_corpus_fits_are_those_of_the_reference(tmp_path):
    """The real-data corpus (tests/realdata/corpus: about fifty real fluids, published
    compilations and IAPWS equations, planted faults): both paths write the same fits."""
    corpus = ROOT / "tests" / "realdata" / "corpus"
    store = ingest(corpus, tmp_path / "corpus.duckdb")
    out = fit_both(store, corpus / "decisions.toml")
    assert out["batched"][0].count("fitted") > 50
    assert_same_fits(out)


def test_synthetic_store_fits_are_those_of_the_reference(tmp_path):
    """Synthetic fluids of the fit benchmark (benchmarks/fit_store.py: vapour-pressure,
    sublimation and Simon-Glatzel melting series with noise, every melting form of the fit
    plan tried): both paths write the same fits."""
    spec = importlib.util.spec_from_file_location("fit_store_benchmark",
                                                  ROOT / "benchmarks" / "fit_store.py")
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    bench.write_raw(tmp_path / "raw", n_fluids=12, n_points=60, seed=7)
    store = ingest(tmp_path / "raw", tmp_path / "synthetic.duckdb")
    out = fit_both(store)
    assert out["batched"][0].count("fitted") == 36
    assert {g.form for g in out["batched"][0].groups} >= {"simon-glatzel", "sublimation-power"}
    assert_same_fits(out)


def test_the_stage_refuses_an_unknown_path(store_path):
    """run_fit names the paths it knows."""
    with open_store(store_path) as s, pytest.raises(KeyError, match="batched"):
        run_fit(s.con, path="fast")
