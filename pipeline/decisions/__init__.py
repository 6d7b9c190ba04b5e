"""Curation decisions: a file under version control (``raw/decisions.toml``), replayed on
every run.

- :mod:`~pipeline.decisions.model` — the pydantic models (one action per decision);
- :mod:`~pipeline.decisions.store` — reading and validating the file (JSON Schema, then the
  checks that need the code); errors name the decision and the key;
- :mod:`~pipeline.decisions.apply` — resolving references against the store and the hooks the
  stages call (fit exclusions, the check waiver step, threshold overrides, publish inputs,
  the report rows);
- :mod:`~pipeline.decisions.edit` — appending a decision with tomlkit, keeping comments.

Typical use in a stage::

    decisions = load_decisions(args.decisions)
    run_fit(con, exclusions=exclusions_for_fit(con, decisions))
"""

from pipeline.decisions.apply import (
    Touch,
    WaiverStep,
    exclusions_for_fit,
    publish_decisions,
    report_rows,
    resolve_all,
    with_threshold_overrides,
)
from pipeline.decisions.model import ACTIONS, Decision, DecisionSet
from pipeline.decisions.store import (
    DEFAULT_PATH,
    DecisionsError,
    add_decisions_argument,
    load_decisions,
)

__all__ = [
    "ACTIONS", "DEFAULT_PATH", "Decision", "DecisionSet", "DecisionsError", "Touch", "WaiverStep",
    "add_decisions_argument", "exclusions_for_fit", "load_decisions", "publish_decisions",
    "report_rows", "resolve_all", "with_threshold_overrides",
]
