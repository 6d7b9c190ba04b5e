"""Writing a report folder: results.json (schema-validated), junit.xml, summary.md,
report.html, the ``latest`` pointer, and the figure cache.

``results.json`` follows ``schemas/nightly-results.schema.json``: a ``nightly`` block (the
nightly run record) beside the check run's ``run`` block and ``results``, which are
exactly those of ``check-results.schema.json`` (referenced, not copied). ``junit.xml`` is the
check stage's JUnit writer applied to the same check run, so its counts match the results.

The document is validated before it is written. A result item's validity depends on nothing
but its own content (the item schema has no reference to its siblings), so a
:class:`ValidatedItems` memo keyed by the SHA-256 of the item's JSON and of the schemas skips
items already validated byte for byte in an earlier run (a nightly run reuses most results of
the previous one); the envelope and every other item are validated each time.
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

from pipeline.checks.render import junit_xml
from pipeline.checks.results import CheckRun
from pipeline.errors import EXIT_INTERNAL, FluidLedgerError
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


@dataclass
class ValidatedItems:
    """Hashes of result items found valid against the current schemas, kept in a file."""

    path: Path | None
    seen: set[str] | None = None

    @staticmethod
    def schema_key() -> str:
        from importlib.metadata import version

        from pipeline.ingest.contract import load_schema

        return hashlib.sha256(json.dumps([load_schema(SCHEMA), load_schema(CHECK_SCHEMA),
                                          version("jsonschema")], sort_keys=True).encode()
                              ).hexdigest()[:16]

    def load(self) -> set[str]:
        if self.seen is None:
            self.seen = set()
            if self.path is not None and self.path.is_file():
                self.seen = set(self.path.read_text().split())
        return self.seen

    def save(self, keep: set[str]) -> None:
        if self.path is not None:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            _atomic_write(self.path, "\n".join(sorted(keep)) + "\n")


def _item_hash(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()[:32]


def validated_json(document: Mapping[str, Any], memo: ValidatedItems | None = None) -> str:
    """``document`` as JSON text after validating it (result items already in ``memo`` are
    not validated again; the memo is updated with this document's items)."""
    texts = [json.dumps(r, sort_keys=True, allow_nan=False) for r in document["results"]]
    hashes = [_item_hash(t) for t in texts]
    seen = memo.load() if memo is not None else set()
    fresh = [i for i, h in enumerate(hashes) if h not in seen]
    validate_results({**document, "results": [document["results"][i] for i in fresh]},
                     positions=fresh)
    if memo is not None:
        memo.save(set(hashes))
    head = json.dumps({k: v for k, v in document.items() if k != "results"}, indent=1,
                      allow_nan=False)
    body = ",\n".join(texts)
    return head[:-2] + ',\n "results": [\n' + body + "\n ]\n}\n"


def _atomic_write(path: Path, data: str | bytes) -> None:
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(4)}.tmp")
    if isinstance(data, bytes):
        tmp.write_bytes(data)
    else:
        tmp.write_text(data, encoding="utf-8")
    os.replace(tmp, path)


def write_report(folder: Path, nightly: Mapping[str, Any], page: ReportPage, *,
                 memo: ValidatedItems | None = None) -> dict[str, str]:
    """Write results.json (validated first), junit.xml, summary.md and report.html."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = {k: folder / v for k, v in FILES.items()}
    document = results_document(nightly, page.check_run)
    _atomic_write(paths["results"], validated_json(document, memo))
    _atomic_write(paths["junit"], junit_xml(page.check_run))
    _atomic_write(paths["summary"], render_summary(nightly, str(paths["html"])))
    _atomic_write(paths["html"], render_html(page))
    return {k: str(p) for k, p in paths.items()}


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
        if not self.folder.is_dir():
            return 0
        gone = 0
        for p in self.folder.iterdir():   # figures of older versions (.png) go too
            if p.is_file() and p.suffix in (".json", ".png") and p.stem not in keep:
                p.unlink(missing_ok=True)
                gone += 1
        return gone
