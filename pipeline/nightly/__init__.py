"""The nightly job: ingest what is new, refit what changed, check, publish when clean, report.

Recipe (:func:`run_nightly`):

1. **ingest** -- a pre-scan hashes every batch folder of ``raw/`` and compares the hashes with
   the current ``raw_file`` rows; only new or changed batches go to
   :func:`pipeline.ingest.stage.run_ingest` (the whole root when a batch disappeared, when
   ``fluids.toml`` changed, or with ``--full``, so retirements and fluid updates happen there).
2. **fit** -- each fluid's *data fingerprint* (its current raw files, fixed points, stated
   constants and molar mass, from the store) is compared with the one the previous nightly run
   recorded; :func:`pipeline.fitting.stage.run_fit` runs for the fluids that differ (and it
   skips their groups whose input hash is unchanged).
3. **check** -- a fluid's *check fingerprint* is its data fingerprint plus its current fit ids;
   fluids whose fingerprint is unchanged (and with the same check code, thresholds and
   decisions) reuse their results from the previous check run, the others are checked
   afresh. The combined check run is stored (kind ``check``), so every run keeps all results.
4. **changes** -- status transitions against the previous run
   (:func:`pipeline.report.history.transitions`) and changed recommended values.
5. **publish** -- only when nothing failed, errored or failed to ingest, through
   :func:`~pipeline.nightly.publishing.publish_adapter`; otherwise the reason is recorded.
6. **verify** -- :func:`pipeline.verify.verify_connection` (what ``fluidledger verify`` does)
   over the run's own connection and the releases in the store's folder; a finding makes the
   verdict ``error``.
7. **report** -- ``reports/<run-id>/`` with report.html, results.json, junit.xml, summary.md
   and nightly.log; ``reports/latest`` points to it.

A ``run`` row (kind ``nightly``) holds the parameters and the result record plus the
per-fluid state the next run compares with. Exit codes: 0 pass (warnings allowed), 1 a check
failed (0 with ``exit_zero``), 2 a batch could not be ingested, 3 a check raised, the
publish failed, verify found damage, or an internal error.
"""

from pipeline.nightly.curation import Curation
from pipeline.nightly.logs import run_log
from pipeline.nightly.model import NightlyOptions, NightlyResult, Stage, refused_batches
from pipeline.nightly.publishing import publish_adapter
from pipeline.nightly.reporting import decide_context
from pipeline.nightly.run import run_nightly

__all__ = ["Curation", "NightlyOptions", "NightlyResult", "Stage", "decide_context",
           "publish_adapter", "refused_batches", "run_log", "run_nightly"]
