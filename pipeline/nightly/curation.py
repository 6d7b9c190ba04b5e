"""The curation decisions a nightly run honours, and the hook each stage calls."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path

from pipeline import decisions as dec
from pipeline.checks.engine import POSTPROCESSORS
from pipeline.decisions import checks as decision_checks
from pipeline.nightly.model import NightlyOptions
from pipeline.nightly.state import digest


@dataclass
class Curation:
    """The curation decisions the run honours, and the hooks each stage calls.

    Decisions come from ``--decisions`` or ``<raw>/decisions.toml`` (an empty set when that
    file is absent) through :mod:`pipeline.decisions`. ``fingerprint`` changes whenever the
    file does (and daily while a waiver is in force, since waivers expire by date), which
    re-runs every fit and check.
    """
    decisions: dec.DecisionSet = field(default_factory=lambda: dec.DecisionSet(path=""))
    path: str | None = None
    fingerprint: str = ""

    @classmethod
    def load(cls, opts: NightlyOptions) -> "Curation":
        path = opts.decisions or (opts.raw / "decisions.toml")
        if opts.decisions is None and not path.is_file():
            return cls(dec.DecisionSet(path=str(path)), None, "")
        decisions = dec.load_decisions(path)
        h = [hashlib.sha256(Path(path).read_bytes()).hexdigest()]
        if any(d.kind == "waive_check" for d in decisions):
            h.append(date.today().isoformat())
        return cls(decisions, str(path), digest(*h))

    def fit_exclusions(self, con) -> dict[int, str]:
        return dec.exclusions_for_fit(con, self.decisions)

    def thresholds(self, thresholds):
        return dec.with_threshold_overrides(thresholds, self.decisions)

    def check_exclusions(self, con):
        """What the checks leave out (computed once per run)."""
        return decision_checks.check_exclusions(con, self.decisions)

    def check_inputs(self, data: dict, exclusions, thresholds) -> tuple[dict, tuple]:
        """The fluids as the checks read them (excluded data left out) and the post-processing
        steps: the engine's, the exclusion step (findings resting on excluded data become
        ``excluded``), the waiver step."""
        kept, steps = decision_checks.check_inputs(None, self.decisions, data, thresholds,
                                                   exclusions)
        return kept, (*POSTPROCESSORS, *steps)

    def publish_decisions(self, con):
        return dec.publish_decisions(con, self.decisions)

    def report_rows(self, con, check_run_id: str) -> list[dict]:
        """Rows of the report's decisions section."""
        return dec.report_rows(con, self.decisions, check_run_id=check_run_id)
