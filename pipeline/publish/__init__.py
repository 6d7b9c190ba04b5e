"""The publish stage: curated releases with per-value provenance, exports and SQL access.

Modules, one concern each:

* :mod:`~pipeline.publish.policy` - the recommendation policy (``policy.toml``) and curation
  decisions;
* :mod:`~pipeline.publish.inputs` - what a release is made from, read from the store, and its
  fingerprint;
* :mod:`~pipeline.publish.recommend` - candidates and recommended values (stated, derived
  normal boiling point and acentric factor, weighted means);
* :mod:`~pipeline.publish.derived` - curves of many fluids evaluated and inverted together,
  bit for bit as one at a time;
* :mod:`~pipeline.publish.provenance` - the checks bearing on each value and its PROV record;
* :mod:`~pipeline.publish.exports` - Parquet, CSV and JSON exports, validation, manifest;
* :mod:`~pipeline.publish.render` - the JSON and CSV text of rows, fast and byte-identical;
* :mod:`~pipeline.publish.schemacheck` - every row checked against its JSON Schema in bulk;
* :mod:`~pipeline.publish.incremental` - the rows of unchanged fluids copied from the previous
  release;
* :mod:`~pipeline.publish.sqlmacros` - SQL expressions of the correlation forms and the
  ``fl_*`` macros;
* :mod:`~pipeline.publish.published` - the read-only DuckDB file for readers and read-only
  queries;
* :mod:`~pipeline.publish.release` - the publish recipe;
* :mod:`~pipeline.publish.diff` - what changed between two releases and why.
"""

from pipeline.publish.policy import NO_DECISIONS, Decisions, Policy
from pipeline.publish.release import PublishResult, ReleaseRefused, build_content, publish

__all__ = ["NO_DECISIONS", "Decisions", "Policy", "PublishResult", "ReleaseRefused",
           "build_content", "publish"]
