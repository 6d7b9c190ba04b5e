"""Recommended values: published fixed points, derived values, policy steps and decisions."""

from __future__ import annotations

import json
import math
from importlib import resources

import duckdb
import pytest

from pipeline.correlations import Curve
from pipeline.errors import ConfigError
from pipeline.publish import Decisions, Policy
from pipeline.publish.inputs import load_inputs
from pipeline.publish.provenance import CheckIndex, Refs
from pipeline.publish.recommend import Candidate, Recommendation, choose, recommend_all

# (fluid, value_id tail, published value [SI], source)
PUBLISHED_POINTS = [
    ("water", "critical:vapour,liquid/Tc", 647.096, "IAPWS-95, R6-95(2018)"),
    ("water", "critical:vapour,liquid/pc", 22.064e6, "IAPWS-95, R6-95(2018)"),
    ("water", "critical:vapour,liquid/rhoc", 322.0, "IAPWS-95, R6-95(2018)"),
    ("water", "triple:vapour,liquid,Ih/Tt", 273.16, "IAPWS-95, R6-95(2018)"),
    ("water", "triple:vapour,liquid,Ih/pt", 611.657, "IAPWS R14-08(2011)"),
    ("carbon-dioxide", "critical:vapour,liquid/Tc", 304.1282, "Span & Wagner 1996"),
    ("carbon-dioxide", "critical:vapour,liquid/pc", 7.3773e6, "Span & Wagner 1996"),
    ("carbon-dioxide", "critical:vapour,liquid/rhoc", 467.6, "Span & Wagner 1996"),
    ("carbon-dioxide", "triple:vapour,liquid,solid/Tt", 216.592, "Span & Wagner 1996"),
    ("carbon-dioxide", "triple:vapour,liquid,solid/pt", 0.51795e6, "Span & Wagner 1996"),
]
WATER_NORMAL_BOILING_K = 373.124  # IAPWS-95 on ITS-90 (373.1243 K)


def _constants(path) -> dict[str, dict]:
    con = duckdb.connect(str(path), read_only=True)
    try:
        cur = con.execute("SELECT * FROM curated_constants")
        names = [d[0] for d in cur.description]
        return {r[1]: dict(zip(names, r)) for r in cur.fetchall()}
    finally:
        con.close()


def _provenance(path, value_id: str) -> dict:
    con = duckdb.connect(str(path), read_only=True)
    try:
        cur = con.execute("SELECT * FROM curated_provenance WHERE value_id = ?", [value_id])
        return dict(zip([d[0] for d in cur.description], cur.fetchone()))
    finally:
        con.close()


@pytest.mark.parametrize("fluid, tail, published, source", PUBLISHED_POINTS)
def test_recommended_points_agree_with_published_values(published_demo, fluid, tail, published,
                                                        source):
    """The recommended critical and triple points of water and CO2 lie within their standard
    uncertainty of the published values."""
    row = _constants(published_demo["file"])[f"{fluid}/{tail}"]
    assert row["u_si"] is not None and row["u_si"] > 0
    assert abs(row["value_si"] - published) <= row["u_si"], source


def test_water_normal_boiling_point_from_the_fitted_curve(published_demo):
    """The water normal boiling point derived from the fitted vapour-pressure curve is within
    0.02 K of 373.124 K (IAPWS-95, ITS-90), with a delta-method uncertainty."""
    rec = _provenance(published_demo["file"], "water/constant/normal_boiling_T")
    derived = [e for e in rec["was_derived_from"] if e["entity"] == "fit"]
    assert len(derived) == 1
    assert abs(derived[0]["value_si"] - WATER_NORMAL_BOILING_K) < 0.02
    con = duckdb.connect(str(published_demo["store"]), read_only=True)
    curve_json = con.execute("SELECT curve_json FROM fit WHERE fit_id = ?",
                             [derived[0]["entity_id"]]).fetchone()[0]
    con.close()
    curve = Curve.from_dict(json.loads(curve_json))
    T = derived[0]["value_si"]
    assert curve.value(T) == pytest.approx(101325.0, rel=1e-9)
    assert derived[0]["u_si"] == pytest.approx(curve.u(T) / curve.slope(T), rel=1e-12)


def test_acentric_factor_is_derived_with_its_method_and_fit(published_demo):
    """Argon's acentric factor is derived from the fitted curve at 0.7 Tc (-0.0022 for the
    Tegeler et al. 1999 ancillary) and names the fit it came from."""
    row = _constants(published_demo["file"])["argon/constant/acentric_factor"]
    rec = _provenance(published_demo["file"], "argon/constant/acentric_factor")
    assert row["method"] == "derived" and rec["fit_id"].startswith("argon/liquid-vapour/")
    assert row["value_si"] == pytest.approx(-0.0022, abs=3e-4)
    assert {e["entity_id"] for e in rec["was_derived_from"] if e["entity"] == "value"} == {
        "argon/critical:vapour,liquid/Tc", "argon/critical:vapour,liquid/pc"}


def test_discrepant_source_is_excluded_and_the_exclusion_recorded(published_demo):
    """Nitrogen's Tc leaves out the source that failed sources.agreement and says why."""
    row = _constants(published_demo["file"])["nitrogen/critical:vapour,liquid/Tc"]
    assert row["value_si"] == 126.192 and row["source_ids"] == ["span-2000-nitrogen-ancillaries"]
    rec = _provenance(published_demo["file"], "nitrogen/critical:vapour,liquid/Tc")
    left = [e for e in rec["was_derived_from"] if not e["used"]]
    assert [e["source_id"] for e in left] == ["lit-nitrogen-critical-point"]
    assert "sources.agreement" in left[0]["note"]
    assert any(c["check_id"] == "sources.agreement" and c["status"] == "fail"
               for c in rec["checks"])


def _cand(value, u, kind, source) -> Candidate:
    ent = {"entity": "fixed_point", "entity_id": source, "source_id": source, "file_sha256": None,
           "file_path": None, "row_numbers": [1], "obs_ids": [], "value_si": value, "u_si": u,
           "used": True, "note": ""}
    return Candidate(value, u, kind, "stated", source, (ent,), Refs(), f"stated by {source}")


def test_weighted_mean_of_the_best_kind_with_birge_expansion():
    """Two evaluated values combine by inverse-variance weights; the literature one is ranked
    out; the uncertainty is expanded by the Birge ratio when it exceeds 1."""
    cands = [_cand(10.0, 0.1, "evaluated", "a"), _cand(10.4, 0.2, "evaluated", "b"),
             _cand(50.0, 0.01, "literature", "c")]
    r = choose("f", "critical:vapour,liquid", "Tc", cands, Policy.load(), Decisions(),
               CheckIndex([]))
    w = [1 / 0.1**2, 1 / 0.2**2]
    mean = (w[0] * 10.0 + w[1] * 10.4) / sum(w)
    birge = math.sqrt(sum(wi * (x - mean) ** 2 for wi, x in zip(w, (10.0, 10.4))))
    assert isinstance(r, Recommendation) and r.method == "recommended"
    assert r.value == pytest.approx(mean, rel=1e-14)
    assert r.birge_ratio == pytest.approx(birge, rel=1e-12)
    assert r.u == pytest.approx(birge / math.sqrt(sum(w)), rel=1e-12)
    assert [(c.source_id, why.split(" (")[0]) for c, why in r.left_out] == [
        ("c", "kind literature ranks below the best available")]


def test_decisions_exclude_and_prefer_sources_with_their_ids():
    """A curation decision excluding a source, and one preferring another, are honoured and
    their ids recorded."""
    cands = [_cand(10.0, 0.1, "evaluated", "a"), _cand(10.4, 0.2, "evaluated", "b"),
             _cand(10.2, 0.3, "measurement", "m")]
    key = "critical:vapour,liquid|Tc"
    decisions = Decisions(exclude={("f", key): {"a": "D-1"}}, prefer={("f", key): ("m", "D-2")})
    r = choose("f", "critical:vapour,liquid", "Tc", cands, Policy.load(), decisions,
               CheckIndex([]))
    assert r.value == 10.2 and r.decision_ids == ["D-1", "D-2"]
    notes = {c.source_id: why for c, why in r.left_out}
    assert notes["a"] == "excluded by curation decision D-1"
    assert "D-2 prefers m" in notes["b"]


def test_derived_values_from_failed_fits_are_left_out(demo_store):
    """A failed finding naming the water vapour-pressure fit leaves the derived normal boiling
    point out with the reason recorded; without it the derived value is only ranked below the
    stated standard one."""
    con = duckdb.connect(str(demo_store), read_only=True)
    inputs = load_inputs(con)
    con.close()
    fit = next(f for f in inputs.fits if f["fluid_id"] == "water"
               and f["boundary"] == "liquid-vapour" and f["quantity"] == "pressure")

    def derived_reason():
        recs, _ = recommend_all(inputs, Policy.load(), Decisions(), CheckIndex(inputs.checks))
        nbp = next(r for r in recs if r.value_id == "water/constant/normal_boiling_T")
        assert nbp.value == 373.1243 and nbp.method == "stated"
        (why,) = [why for c, why in nbp.left_out if c.method == "derived"]
        return why

    assert derived_reason().startswith("kind derived ranks below the best available (standard)")
    inputs.checks.append({"check_id": "critical.curve-end", "fluid_id": "water",
                          "subject": "p(Tc)", "status": "fail", "message": "planted",
                          "refs": {"fp_ids": [], "obs_ids": [], "fit_ids": [fit["fit_id"]],
                                   "discrepant": [], "stated": []}})
    assert derived_reason() == (f"its fit {fit['fit_id']} carries failed checks: "
                                "critical.curve-end fail")


def test_policy_rejects_a_misspelt_key(tmp_path):
    """A policy file with an unknown key is a ConfigError naming the key."""
    text = resources.files("pipeline.publish").joinpath("policy.toml").read_text("utf-8")
    bad = tmp_path / "policy.toml"
    bad.write_text(text.replace("expand_by_birge_ratio", "expand_by_birge"), encoding="utf-8")
    with pytest.raises(ConfigError, match="expand_by_birge"):
        Policy.load(bad)
