"""The nightly run's record: its options, each stage's outcome, the result and its verdict."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from pipeline import __version__
from pipeline.errors import EXIT_CHECK_FAILED, EXIT_INTERNAL, EXIT_OK, EXIT_USAGE

VERDICT_EXIT = {"pass": EXIT_OK, "fail": EXIT_CHECK_FAILED, "input-error": EXIT_USAGE,
                "error": EXIT_INTERNAL}


@dataclass(frozen=True)
class NightlyOptions:
    """What to run on: paths and switches of ``fluidledger nightly``."""
    store: str | Path | None = None
    raw: Path = Path("raw")
    reports: Path = Path("reports")
    fluids: tuple[str, ...] | None = None
    full: bool = False
    quiet: bool = False
    verbose: bool = False
    exit_zero: bool = False
    decisions: Path | None = None

    def parameters(self) -> dict:
        return {"store": str(self.store) if self.store else None, "raw": str(self.raw),
                "reports": str(self.reports), "fluids": list(self.fluids) if self.fluids else None,
                "full": self.full, "exit_zero": self.exit_zero,
                "decisions": str(self.decisions) if self.decisions else None}


@dataclass
class Stage:
    """What one stage of the run did."""
    status: str
    duration_s: float
    text: str
    detail: dict = field(default_factory=dict)

    def asdict(self) -> dict:
        return {"status": self.status, "duration_s": round(self.duration_s, 6),
                "text": self.text, "detail": self.detail}


@dataclass
class NightlyResult:
    """The record of one nightly run: ``asdict()`` for machines, ``asstr()`` for people."""
    run_id: str
    started_at: str
    finished_at: str = ""
    duration_s: float = 0.0
    parameters: dict = field(default_factory=dict)
    verdict: str = "error"
    exit_code: int = EXIT_INTERNAL
    no_changes: bool = False
    previous_run_id: str | None = None
    check_run_id: str | None = None
    counts: dict = field(default_factory=dict)
    stages: dict[str, Stage] = field(default_factory=dict)
    changes: dict = field(default_factory=lambda: {"new_failures": [], "fixed": [],
                                                  "changed": [], "values": [],
                                                  "values_basis": ""})
    publish: dict = field(default_factory=lambda: {"status": "skipped", "release_id": None,
                                                  "reason": None})
    report: dict = field(default_factory=dict)

    def asdict(self) -> dict:
        return {"run_id": self.run_id, "kind": "nightly", "started_at": self.started_at,
                "finished_at": self.finished_at, "duration_s": round(self.duration_s, 6),
                "pipeline_version": __version__, "parameters": self.parameters,
                "verdict": self.verdict, "exit_code": self.exit_code,
                "no_changes": self.no_changes, "previous_run_id": self.previous_run_id,
                "check_run_id": self.check_run_id, "counts": self.counts,
                "stages": {k: s.asdict() for k, s in self.stages.items()},
                "changes": self.changes, "publish": self.publish, "report": self.report}

    def verdict_line(self) -> str:
        """The run in one line: verdict, exit code, counts, publication and the report path
        (what ``fluidledger nightly`` prints off a terminal, e.g. from cron)."""
        counts = ", ".join(f"{n} {s}" for s, n in self.counts.items() if n)
        pub = self.publish
        return (f"nightly {self.run_id}: {self.verdict.upper()} (exit {self.exit_code}); "
                f"checks: {counts or 'none'}" + ("; no changes" if self.no_changes else "")
                + f"; publish: {pub['status']}"
                + (f" {pub['release_id']}" if pub.get("release_id") else "")
                + (f"; report: {self.report['html']}" if self.report.get("html") else ""))

    def asstr(self) -> str:
        counts = ", ".join(f"{n} {s}" for s, n in self.counts.items() if n)
        lines = [f"nightly {self.run_id}: {self.verdict.upper()} (exit {self.exit_code}); "
                 f"checks: {counts or 'none'}"]
        refused = refused_batches(self.asdict())
        if refused:
            lines.append(f"refused batch(es), not ingested ({len(refused)}; the others were): "
                         + ", ".join(refused))
        if self.no_changes:
            lines.append(f"no changes since {self.previous_run_id}: nothing ingested, nothing "
                         "refitted, check results reused")
        for name, s in self.stages.items():
            lines.append(f"  {name:<8} {s.status:<11} {s.duration_s:7.2f} s  {s.text}")
        ch = self.changes
        if self.previous_run_id is None:
            lines.append("first nightly run on this store: nothing to compare with")
        for title, key in (("new failures", "new_failures"), ("fixed", "fixed")):
            if ch[key]:
                lines.append(f"{title} ({len(ch[key])}):")
                lines += [f"  {t['check_id']} {t['fluid_id']}: {t['before'] or 'new'} -> "
                          f"{t['after']}" for t in ch[key][:20]]
                if len(ch[key]) > 20:
                    lines.append(f"  ... and {len(ch[key]) - 20} more")
        if ch["values"]:
            lines.append(f"changed values: {len(ch['values'])} (see the report)")
        pub = self.publish
        lines.append(f"publish: {pub['status']}"
                     + (f" ({pub['release_id'] or pub['reason']})"
                        if pub['release_id'] or pub['reason'] else ""))
        if self.report.get("html"):
            lines.append(f"report: {self.report['html']}")
        return "\n".join(lines)


def refused_batches(nightly: Mapping[str, Any]) -> list[str]:
    """Names of the batches the run's ingest stage refused (from the run record)."""
    stage = nightly.get("stages", {}).get("ingest", {})
    return [e["batch"] for e in stage.get("detail", {}).get("errors", [])]


def verdict(counts: Mapping[str, int], ingest: Stage, publish: dict,
            verify: Stage | None = None) -> str:
    if counts.get("error") or publish.get("status") == "failed":
        return "error"
    if verify is not None and verify.status == "failed":
        return "error"
    if any(e.get("internal") for e in ingest.detail.get("errors", [])):
        return "error"       # a batch refused by a fault of the code (the others loaded)
    if ingest.detail.get("errors"):
        return "input-error"
    return "fail" if counts.get("fail") else "pass"
