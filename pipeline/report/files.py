"""Writing a report folder: results.json (schema-validated), junit.xml, summary.md,
report.html, the ``latest`` pointer, and the figure cache.

``results.json`` follows ``schemas/nightly-results.schema.json``: a ``nightly`` block (the
nightly run record) beside the check run's ``run`` block and ``results``, which are
exactly those of ``check-results.schema.json`` (referenced, not copied). ``junit.xml`` holds
what the check stage's JUnit writer writes for the same check run, so its counts match the
results.

Both are assembled from per-fluid fragments (:mod:`pipeline.report.fragments`), cached by
the check run whose evaluation made each fluid's results: a nightly run after one changed
batch builds the fragments of the fluids it checked again and reads the others. A result
item's validity depends on nothing but its own content (the item schema has no reference to
its siblings), so the items of a fragment are validated when it is built (the cache key
holds the schemas); the envelope is validated each time.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import secrets
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from typing import Any, Mapping, Sequence

from pipeline.checks.results import CheckRun
from pipeline.errors import EXIT_INTERNAL, FluidLedgerError
from pipeline.report import fragments as frag
from pipeline.report.html import ReportPage, render_html
from pipeline.report.summary import render_summary

log = logging.getLogger(__name__)

SCHEMA = "nightly-results.schema.json"
CHECK_SCHEMA = "check-results.schema.json"
FILES = {"html": "report.html", "results": "results.json", "junit": "junit.xml",
         "summary": "summary.md", "log": "nightly.log"}


class ReportSchemaError(FluidLedgerError):
    """The results document does not match its schema: a bug, not a user error (exit 3)."""

    exit_code = EXIT_INTERNAL


@lru_cache(maxsize=1)
def _validator():
    import jsonschema
    from referencing import Registry, Resource

    from pipeline.ingest.contract import load_schema

    nightly, check = load_schema(SCHEMA), load_schema(CHECK_SCHEMA)
    registry = Registry().with_resources(
        [(s["$id"], Resource.from_contents(s)) for s in (nightly, check)])
    return jsonschema.Draft202012Validator(nightly, registry=registry)


def validate_results(document: Mapping[str, Any], *,
                     positions: Sequence[int] | None = None) -> None:
    """Raise :class:`ReportSchemaError` unless ``document`` matches the nightly results schema.

    ``positions`` gives, for each item of ``document["results"]``, its index in the full
    document when only some items are validated (the message names the full index).
    """
    errors = sorted(_validator().iter_errors(document),
                    key=lambda err: [str(p) for p in err.absolute_path])
    if errors:
        first = errors[0]
        path = list(first.absolute_path)
        if positions is not None and len(path) > 1 and path[0] == "results":
            path[1] = positions[path[1]]
        where = "/".join(str(p) for p in path) or "(top)"
        raise ReportSchemaError(f"nightly results do not match {SCHEMA} at {where}: "
                                f"{first.message} ({len(errors)} problem(s))")


def results_document(nightly: Mapping[str, Any], check_run: CheckRun) -> dict:
    checks = check_run.asdict()
    return {"nightly": dict(nightly), "run": checks["run"], "results": checks["results"]}


def validated_json(document: Mapping[str, Any]) -> str:
    """``document`` as the JSON text of results.json, after validating it whole."""
    validate_results(document)
    head = json.dumps({k: v for k, v in document.items() if k != "results"}, indent=1,
                      allow_nan=False)
    body = ",\n".join(json.dumps(r, sort_keys=True, allow_nan=False)
                      for r in document["results"])
    return head[:-2] + ',\n "results": [\n' + body + "\n ]\n}\n"


def results_bytes(nightly: Mapping[str, Any], run: CheckRun,
                  fragments: Sequence[frag.Fragment]) -> bytes:
    """results.json from the fragments, after validating the envelope and the items of the
    fragments built now (those read from the cache were validated when they were built)."""
    head = {"nightly": dict(nightly), "run": run.asdict(results=False)["run"]}
    order = frag.sorted_items(fragments)
    fresh = [(pos, fragments[f].fresh[j]) for pos, (f, j) in enumerate(order)
             if fragments[f].fresh is not None]
    validate_results({**head, "results": [item for _, item in fresh]},
                     positions=[pos for pos, _ in fresh])
    return frag.results_json(head, fragments, order)


def _atomic_write(path: Path, data: str | bytes) -> None:
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(4)}.tmp")
    if isinstance(data, bytes):
        tmp.write_bytes(data)
    else:
        tmp.write_text(data, encoding="utf-8")
    os.replace(tmp, path)


def write_report(folder: Path, nightly: Mapping[str, Any], page: ReportPage, *,
                 origins: Mapping[str, str] | None = None, cache: Path | None = None,
                 prune: bool = True) -> dict[str, Any]:
    """Write results.json (validated first), junit.xml, summary.md and report.html.

    ``origins`` maps each fluid to the check run that made its results and ``cache`` is the
    fragment cache's folder: fragments found there are reused, the others built and kept
    (``prune`` deletes the fragments this run did not use). Returns what it did."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = {k: folder / v for k, v in FILES.items()}
    store = frag.FragmentCache(cache) if cache is not None else None
    run = page.check_run
    with frag.quiet_collector():
        fragments, detail = frag.fragments(run, origins, store)
        _atomic_write(paths["results"], results_bytes(nightly, run, fragments))
        keys = detail.pop("keys")
        if store is not None:                # validated: the built fragments may be kept
            for f in fragments:
                if f.fresh is not None and f.fluid_id in keys:
                    store.put(keys[f.fluid_id], f)
            if prune:
                store.prune(set(keys.values()))
        _atomic_write(paths["junit"], frag.junit_xml(run, fragments))
        del fragments
    _atomic_write(paths["summary"], render_summary(nightly, str(paths["html"])))
    _atomic_write(paths["html"], render_html(page))
    return detail


def update_latest(reports: Path, run_id: str) -> str:
    """Point ``reports/latest`` at ``run_id``: a relative symlink, replaced atomically; where
    symlinks cannot be made, a text file holding the run id. Returns the kind made."""
    latest = reports / "latest"
    tmp = reports / f".latest-{secrets.token_hex(4)}"
    try:
        os.symlink(run_id, tmp, target_is_directory=True)
        if latest.is_dir() and not latest.is_symlink():
            raise OSError(f"{latest} is a real directory; not replaced")
        os.replace(tmp, latest)
        return "symlink"
    except (OSError, NotImplementedError) as err:
        if tmp.is_symlink():
            tmp.unlink()
        log.info("reports/latest as a text file (%s)", err)
        if latest.is_symlink():
            latest.unlink()
        if latest.is_dir():
            return "unchanged"
        _atomic_write(latest, run_id + "\n")
        return "file"


def source_hash(*modules) -> str:
    """SHA-256 over the source files of ``modules`` (a change of code invalidates caches)."""
    h = hashlib.sha256()
    for m in modules:
        h.update(Path(m.__file__).read_bytes())
    return h.hexdigest()


@dataclass
class PlotCache:
    """A fluid's drawn figures (:meth:`FluidFigures.to_json` bytes) keyed by a hash of
    everything they show, under ``reports/.cache/plots``."""

    folder: Path
    enabled: bool = True
    suffix: str = ".json"

    def path(self, key: str) -> Path:
        return self.folder / f"{key}{self.suffix}"

    def get(self, key: str) -> bytes | None:
        p = self.path(key)
        if self.enabled and p.is_file():
            return p.read_bytes()
        return None

    def put(self, key: str, data: bytes) -> None:
        self.folder.mkdir(parents=True, exist_ok=True)
        _atomic_write(self.path(key), data)

    def prune(self, keep: set[str]) -> int:
        """Delete cached plots whose key is not in ``keep``; returns how many."""
        return frag.prune_folder(self.folder, keep, (".json", ".png"))   # older .png too
