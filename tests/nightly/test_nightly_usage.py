"""Each stage of a nightly run records its wall time and peak RSS: in the run summary, in
nightly.log and in what ``--verbose`` prints."""

from __future__ import annotations

import json
import re

import duckdb
import pytest

from nightly_fixtures import cli, copy_demo
from pipeline.report.files import validate_results

STAGES = ("ingest", "fit", "check", "publish", "verify", "report")


@pytest.fixture(scope="module")
def verbose_run(tmp_path_factory):
    """A verbose nightly over the demo's argon batch (one fluid, clean: it publishes)."""
    tmp = tmp_path_factory.mktemp("nightly-usage")
    raw = copy_demo(tmp, ("tegeler-1999-argon-ancillaries", "brackenridge-rig-b-argon-1988"))
    return tmp, raw


def _run(tmp, raw, capsys):
    code = cli(["nightly", "--verbose", "--store", str(tmp / "store.duckdb"), "--raw", str(raw),
                "--reports", str(tmp / "reports"), "--exit-zero"])
    out, err = capsys.readouterr()
    with duckdb.connect(str(tmp / "store.duckdb"), read_only=True) as con:
        run_id, summary = con.execute(
            "SELECT run_id, summary_json FROM run WHERE kind = 'nightly' "
            "ORDER BY started_at DESC, rowid DESC LIMIT 1").fetchone()
    return code, out, err, run_id, json.loads(summary)


def test_every_stage_records_a_plausible_time_and_peak(verbose_run, capsys):
    """The run summary holds, per stage, a wall time covering the stage's duration and a
    peak RSS that is positive, at least the RSS at the stage's start and end, and below the
    machine's memory."""
    tmp, raw = verbose_run
    code, out, err, run_id, summary = _run(tmp, raw, capsys)
    assert code == 0
    total_mib = _machine_mib()
    for name in STAGES:
        usage = summary["stages"][name]["usage"]
        assert usage["wall_s"] >= 0
        # the measured block holds the stage's own timer (and the imports before it)
        assert usage["wall_s"] >= summary["stages"][name]["duration_s"] - 0.01, name
        assert 30 < usage["peak_rss_mib"] < total_mib, name     # Python + DuckDB + numpy
        for key in ("rss_start_mib", "rss_end_mib"):
            if usage[key] is not None:
                assert usage[key] <= usage["peak_rss_mib"] + 0.1, (name, key)
        assert usage["method"] in ("stage", "process")
        assert usage["cpu_s"] >= 0 and usage["children_cpu_s"] >= 0
    methods = {summary["stages"][n]["usage"]["method"] for n in STAGES}
    if methods == {"process"}:     # one process peak: it can only grow from stage to stage
        peaks = [summary["stages"][n]["usage"]["peak_rss_mib"] for n in STAGES]
        assert peaks == sorted(peaks)
    # the whole run's wall time covers the stages measured inside it
    assert summary["duration_s"] >= sum(summary["stages"][n]["usage"]["wall_s"]
                                        for n in STAGES[:-1])


def test_the_log_and_the_verbose_output_show_each_stage_peak(verbose_run, capsys):
    """nightly.log has a line per stage with its peak RSS and wall time; --verbose prints the
    same figures under each stage line of the summary."""
    tmp, raw = verbose_run
    code, out, err, run_id, summary = _run(tmp, raw, capsys)
    log = (tmp / "reports" / run_id / "nightly.log").read_text()
    for name in STAGES:
        assert re.search(rf"{name}: .*\[peak RSS [\d,]+ MiB.*, wall \d+\.\d\d s, CPU \d+\.\d\d s\]",
                         log), name
    lines = out.splitlines()
    for name in STAGES:
        i = next(k for k, line in enumerate(lines) if line.startswith(f"  {name} "))
        assert re.search(r"peak RSS [\d,]+ MiB", lines[i + 1]), name
        shown = float(re.search(r"peak RSS ([\d,]+) MiB", lines[i + 1])[1].replace(",", ""))
        assert shown == pytest.approx(summary["stages"][name]["usage"]["peak_rss_mib"], abs=1)


def test_results_json_with_the_stage_figures_validates(verbose_run, capsys):
    """results.json, which now carries each stage's usage, still validates against its schema."""
    tmp, raw = verbose_run
    code, out, err, run_id, summary = _run(tmp, raw, capsys)
    doc = json.loads((tmp / "reports" / run_id / "results.json").read_text())
    validate_results(doc)
    assert doc["nightly"]["stages"]["check"]["usage"]["peak_rss_mib"] > 0


def _machine_mib() -> float:
    with open("/proc/meminfo") as fh:
        return int(fh.readline().split()[1]) / 1024
