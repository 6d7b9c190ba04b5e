"""Diffs between releases: added, removed and changed values, and the sources behind them."""

from __future__ import annotations

import json
import math
import shutil

import duckdb

from pipeline.cli import main
from pipeline.publish.diff import diff_releases

from conftest import RAW, build
from tests.storekit import batch_toml, source, vp_table

NEW_BATCH = """
format_version = 1

[source]
id = "argon-critical-reevaluation"
kind = "evaluated"
citation = "Invented re-evaluation of the argon critical point (test data of the FluidLedger suite)"

[[fixed_point]]
fluid = "argon"
kind = "critical"
T = { value = 150.700, unit = "K", u = 0.015 }
p = { value = 4.864, unit = "MPa", u = 0.003 }
"""


def test_diff_explains_a_change_made_by_a_new_batch(demo_store, tmp_path, capsys):
    """A new evaluated argon critical point moves the recommended Tc to the weighted mean; the
    diff reports old, new, the change in combined-uncertainty units and the new source."""
    out = tmp_path / "out"
    assert main(["publish", "--store", str(demo_store), "--out", str(out), "--allow-failures",
                 "--release", "before", "-q"]) == 0
    raw = tmp_path / "raw"
    shutil.copytree(RAW, raw, ignore=shutil.ignore_patterns("*.py", "__pycache__"))
    (raw / "argon-critical-reevaluation").mkdir()
    (raw / "argon-critical-reevaluation" / "batch.toml").write_text(NEW_BATCH, "utf-8")
    build(demo_store, raw)
    assert main(["publish", "--store", str(demo_store), "--out", str(out), "--allow-failures",
                 "--release", "after", "-q"]) == 0

    con = duckdb.connect(str(demo_store), read_only=True)
    result = diff_releases(con, "before", "after")
    argon = diff_releases(con, "before", "after", fluids=["argon"])
    others = diff_releases(con, "before", "after", fluids=["nitrogen", "water"])
    con.close()
    # the diff over the fluids a release recomputed (argon) is the whole diff
    assert argon.changes == result.changes and others.changes == []
    assert 0 < argon.unchanged < result.unchanged
    by_id = {c.value_id: c for c in result.changes}
    tc = by_id["argon/critical:vapour,liquid/Tc"]
    w = [1 / 0.015**2, 1 / 0.015**2]
    mean, u = (150.687 + 150.700) / 2, 1 / math.sqrt(sum(w))
    assert tc.change == "changed" and tc.old == 150.687
    assert abs(tc.new - mean) < 1e-9 and abs(tc.u_new - u) < 1e-12
    assert abs(tc.z - (mean - 150.687) / math.hypot(0.015, u)) < 1e-9
    assert tc.sources_added == ["argon-critical-reevaluation"]
    assert any("now uses fixed_point" in c and "argon-critical-reevaluation" in c
               for c in tc.causes)
    assert "argon/constant/acentric_factor" in by_id        # derived from the recommended Tc
    assert "water/critical:vapour,liquid/Tc" not in by_id   # untouched values are not listed
    assert result.unchanged > 40

    capsys.readouterr()
    assert main(["diff", "before", "after", "--store", str(demo_store), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["release_a"] == "before" and any(
        c["value_id"] == tc.value_id for c in doc["changes"])
    assert main(["diff", "before", "nope", "--store", str(demo_store)]) == 2


LAB_BATCH = batch_toml(
    source("argon-vp-extra-campaign",
           "Invented argon vapour-pressure campaign (test data of the FluidLedger suite)"),
    [vp_table(p_unit="Pa", u_T_K=0.002, u_p_rel=0.0002)])


def test_diff_gives_curve_values_at_their_reference_temperature(demo_store, tmp_path, capsys):
    """A new argon lab campaign changes the vapour-pressure curve: the diff gives the curve's
    old and new value at its reference temperature (Tc) and counts the new observations."""
    from pipeline.correlations import reference_curve

    out = tmp_path / "out"
    assert main(["publish", "--store", str(demo_store), "--out", str(out), "--allow-failures",
                 "--release", "before", "-q"]) == 0
    raw = tmp_path / "raw"
    shutil.copytree(RAW, raw, ignore=shutil.ignore_patterns("*.py", "__pycache__"))
    batch = raw / "argon-vp-extra-campaign"
    batch.mkdir()
    (batch / "batch.toml").write_text(LAB_BATCH, "utf-8")
    vp = reference_curve("argon", "liquid-vapour", "pressure")   # Tegeler et al. (1999)
    rows = [f"{T:.3f},{float(vp.value(T)) * 1.0003:.2f}" for T in (90, 100, 110, 120, 130, 140)]
    (batch / "vp.csv").write_text("T,p\n" + "\n".join(rows) + "\n", "utf-8")
    build(demo_store, raw)
    assert main(["publish", "--store", str(demo_store), "--out", str(out), "--allow-failures",
                 "--release", "after", "-q"]) == 0

    con = duckdb.connect(str(demo_store), read_only=True)
    curve = {c.value_id: c for c in diff_releases(con, "before", "after").changes}[
        "argon/curve:liquid-vapour/pressure"]
    con.close()
    assert curve.change == "changed" and curve.T_ref_K == 150.687   # Tc (Tegeler et al. 1999)
    assert abs(curve.old / 4.863e6 - 1) < 2e-3 and abs(curve.new / 4.863e6 - 1) < 2e-3
    assert curve.old != curve.new and curve.u_old > 0 and curve.u_new > 0
    assert "now uses 6 observations of argon-vp-extra-campaign/vp.csv (rows 1-6) from " \
           "argon-vp-extra-campaign" in curve.causes

    capsys.readouterr()
    assert main(["diff", "before", "after", "--store", str(demo_store), "--csv"]) == 0
    line = next(x for x in capsys.readouterr().out.splitlines()
                if x.startswith("changed,argon/curve:liquid-vapour/pressure,"))
    cells = line.split(",")
    assert cells[2] and cells[3] and cells[4] == "Pa at 150.687 K"
