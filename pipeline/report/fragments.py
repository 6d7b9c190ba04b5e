"""results.json and junit.xml assembled from per-fluid fragments, cached by whose results
they hold.

A nightly run over 1,000 fluids writes about 43,000 check results into results.json (37 MB)
and junit.xml; after one changed batch every other fluid's results are copies of rows of an
earlier check run. Each fluid's share of the two files is a :class:`Fragment`: its result
items as results.json holds them (JSON text, with the key they are sorted by) and its JUnit
test cases per check (XML text, with their counts and times). A fragment is kept under
``reports/.cache/results/<key>.bin``; the key (:func:`fragment_key`) names the check run whose
evaluation made the fluid's results (its *origin*: a reused result is a copy of that run's
row, so one origin means one content), the fluid, and the schemas and code that write the
files. The report of a run reads the fragments of unchanged fluids and builds only the others
from their results.

The files are assembled, not re-serialised: the items sorted as :meth:`CheckRun.by_status`
sorts them, the test cases in the order of :func:`pipeline.checks.render.junit_xml`, with the
same envelope, so the bytes equal those of the files written without a cache
(``tests/report/test_report_fragments.py`` holds them equal). The numbers of an item are
written as the store keeps them (measured, limit and seconds as floats), so a fragment built
from fresh results equals one built from the same results read back from the store.
"""

from __future__ import annotations

import hashlib
import json
import math
import xml.etree.ElementTree as ET
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

from pipeline.checks.render import _case as junit_case
from pipeline.checks.results import STATUS_ORDER, CheckResult, CheckRun
from pipeline.gcquiet import quiet_collector
from pipeline.safetext import clean

_RANK = {s: i for i, s in enumerate(STATUS_ORDER)}
#: JUnit statuses counted per suite, as :func:`pipeline.checks.render.junit_xml` counts them
_JUNIT = (("fail",), ("error",), ("skip", "waived", "excluded"))
#: what ``ET.indent`` puts before a test case (testsuites > testsuite > testcase)
_CASE_INDENT = "\n    "


def _stored(x: Any) -> float | None:
    """A number as the store keeps it (DOUBLE; NaN and None read back as None)."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def result_item(r: CheckResult) -> dict[str, Any]:
    """One result as results.json holds it (:meth:`CheckResult.asdict`, numbers as stored)."""
    item = r.asdict()
    item["measured"], item["limit"] = _stored(r.measured), _stored(r.limit)
    item["duration_s"] = _stored(r.duration_s)
    return item


@dataclass
class Fragment:
    """One fluid's share of results.json and junit.xml.

    ``items``: (status rank, check id, subject, JSON text) per result, in the order of the
    check run's rows; ``cases``: per check, (XML of the test cases, each followed by the
    indentation of the next, in the order junit.xml lists them; tests, failures, errors,
    skipped; the seconds of each case). ``fresh`` holds the items as dicts when the fragment
    was built now (to be validated), None when it was read from the cache.
    """

    fluid_id: str
    items: list[tuple[int, str, str, bytes]] = field(default_factory=list)
    cases: dict[str, tuple[bytes, int, int, int, int, list[float]]] = field(default_factory=dict)
    fresh: list[dict] | None = None

    @classmethod
    def build(cls, fluid_id: str, results: Sequence[CheckResult]) -> "Fragment":
        """The fragment of ``results`` (one fluid's rows, in the check run's order)."""
        dicts = [result_item(r) for r in results]
        items = [(_RANK[r.status], r.check_id, r.subject,
                  json.dumps(d, sort_keys=True, allow_nan=False).encode("ascii"))
                 for r, d in zip(results, dicts)]
        by_check: dict[str, list[CheckResult]] = {}
        for r in results:
            by_check.setdefault(r.check_id, []).append(r)
        cases = {}
        for check, rs in by_check.items():
            rs = sorted(rs, key=lambda r: r.subject)      # stable, as junit_xml sorts
            root = ET.Element("testsuites")
            suite = ET.SubElement(root, "testsuite")
            for r in rs:
                junit_case(suite, r)
            ET.indent(root)
            suite[-1].tail = _CASE_INDENT                # every case followed by it
            text = clean("".join(ET.tostring(c, encoding="unicode") for c in suite))
            counts = [sum(r.status in kinds for r in rs) for kinds in _JUNIT]
            cases[check] = (text.encode("utf-8"), len(rs), *counts,
                            [r.duration_s or 0.0 for r in rs])
        return cls(fluid_id, items, cases, dicts)

    def to_bytes(self) -> bytes:
        """One header line (JSON: sort keys, lengths, counts, seconds), then the texts."""
        head = {"fluid": self.fluid_id,
                "items": [[rank, check, subject, len(text)]
                          for rank, check, subject, text in self.items],
                "cases": [[check, len(c[0]), *c[1:5], c[5]] for check, c in self.cases.items()]}
        return b"".join([json.dumps(head).encode("ascii"), b"\n",
                         *(t[3] for t in self.items), *(c[0] for c in self.cases.values())])

    @classmethod
    def from_bytes(cls, data: bytes) -> "Fragment":
        end = data.index(b"\n")
        head = json.loads(data[:end])
        pos = end + 1
        items = []
        for rank, check, subject, n in head["items"]:
            items.append((rank, check, subject, data[pos:pos + n]))
            pos += n
        cases = {}
        for check, n, tests, failures, errors, skipped, seconds in head["cases"]:
            cases[check] = (data[pos:pos + n], tests, failures, errors, skipped, seconds)
            pos += n
        if pos != len(data):
            raise ValueError(f"fragment of {head['fluid']}: {len(data)} bytes, its header "
                             f"says {pos}")
        return cls(head["fluid"], items, cases)


def code_key() -> str:
    """Digest of what decides a fragment's bytes besides the results: the schemas of
    results.json, the jsonschema version, and the modules that write items and test cases."""
    from importlib.metadata import version

    from pipeline.checks import render, results
    from pipeline.ingest.contract import load_schema

    h = hashlib.sha256(json.dumps([load_schema("nightly-results.schema.json"),
                                   load_schema("check-results.schema.json"),
                                   version("jsonschema")], sort_keys=True).encode())
    for module in (render, results):
        h.update(Path(module.__file__).read_bytes())
    h.update(Path(__file__).read_bytes())
    return h.hexdigest()[:32]


def fragment_key(code: str, origin: str, fluid_id: str) -> str:
    """The cache key of a fluid's fragment: code, origin check run, fluid."""
    return hashlib.sha256("\0".join((code, origin, fluid_id)).encode()).hexdigest()[:32]


@dataclass
class FragmentCache:
    """Fragments by key under ``reports/.cache/results`` (replaced by rename, never edited)."""

    folder: Path

    def path(self, key: str) -> Path:
        return self.folder / f"{key}.bin"

    def get(self, key: str) -> Fragment | None:
        try:
            return Fragment.from_bytes(self.path(key).read_bytes())
        except (OSError, ValueError, KeyError, TypeError):   # missing or damaged: built again
            return None

    def put(self, key: str, fragment: Fragment) -> None:
        from pipeline.report.files import _atomic_write

        self.folder.mkdir(parents=True, exist_ok=True)
        _atomic_write(self.path(key), fragment.to_bytes())

    def prune(self, keep: set[str]) -> int:
        """Delete fragments whose key is not in ``keep``; returns how many."""
        return prune_folder(self.folder, keep, (".bin",))


def prune_folder(folder: Path, keep: set[str], suffixes: tuple[str, ...]) -> int:
    """Delete the files of ``folder`` named ``<key><suffix>`` whose key is not in ``keep``;
    returns how many (names read once with ``os.scandir``: no stat per kept file)."""
    import os

    gone = 0
    try:
        entries = list(os.scandir(folder))
    except FileNotFoundError:
        return 0
    for entry in entries:
        stem, dot, suffix = entry.name.rpartition(".")
        if dot and "." + suffix in suffixes and stem not in keep and entry.is_file():
            Path(entry.path).unlink(missing_ok=True)
            gone += 1
    return gone


def rows_by_fluid(run: CheckRun, fluids: Iterable[str] | None = None) -> dict[str, list[int]]:
    """Row numbers of the run's results per fluid (of ``fluids`` only, when given), in order."""
    wanted = None if fluids is None else set(fluids)
    out: dict[str, list[int]] = {}
    for i, f in enumerate(run.table.columns["fluid_id"]):
        if wanted is None or f in wanted:
            out.setdefault(f, []).append(i)
    return out


def fragments(run: CheckRun, origins: Mapping[str, str] | None = None,
              cache: FragmentCache | None = None) -> tuple[list[Fragment], dict[str, Any]]:
    """Every fluid's fragment of ``run``: from ``cache`` when the fluid's origin (the check run
    that made its results, ``origins``) has one there, built from the results otherwise (and
    put in the cache once the caller validated them: :meth:`keep`). Also what it did."""
    fluids = list(dict.fromkeys(run.table.columns["fluid_id"]))
    code = code_key() if cache is not None and origins else ""
    keys = {f: fragment_key(code, origins[f], f) for f in fluids
            if code and origins.get(f)}
    out: dict[str, Fragment] = {}
    for f, key in keys.items():
        frag = cache.get(key)
        if frag is not None and frag.fluid_id == f:
            out[f] = frag
    todo = [f for f in fluids if f not in out]
    rows = rows_by_fluid(run, todo)
    table = run.table
    for f in todo:
        out[f] = Fragment.build(f, [table.result(i) for i in rows[f]])
    detail = {"fragments_built": len(todo), "fragments_cached": len(fluids) - len(todo),
              "keys": keys}
    return [out[f] for f in fluids], detail


def sorted_items(frags: Sequence[Fragment]) -> list[tuple[int, int]]:
    """(fragment, item) positions of every result item in the order of results.json: as
    :meth:`CheckRun.by_status` sorts them (status, check, fluid, subject)."""
    entries = [(rank, check, frag.fluid_id, subject, k, j)
               for k, frag in enumerate(frags)
               for j, (rank, check, subject, _) in enumerate(frag.items)]
    entries.sort(key=lambda e: e[:4])     # stable: equal keys keep the run's row order
    return [(e[4], e[5]) for e in entries]


def results_json(head: Mapping[str, Any], frags: Sequence[Fragment],
                 order: Sequence[tuple[int, int]] | None = None) -> bytes:
    """results.json: ``head`` (every key but ``results``, in order) and the fragments' items
    in ``order`` (:func:`sorted_items`)."""
    order = sorted_items(frags) if order is None else order
    text = json.dumps(dict(head), indent=1, allow_nan=False)
    body = b",\n".join([frags[k].items[j][3] for k, j in order])
    return (text[:-2] + ',\n "results": [\n').encode("ascii") + body + b"\n ]\n}\n"


def junit_xml(run: CheckRun, frags: Sequence[Fragment]) -> bytes:
    """junit.xml as :func:`pipeline.checks.render.junit_xml` writes it, from the fragments."""
    ordered = sorted(frags, key=lambda frag: frag.fluid_id)
    root = ET.Element("testsuites", name=f"fluidledger check {run.run_id}")
    totals = dict.fromkeys(("tests", "failures", "errors", "skipped"), 0)
    total_time = 0.0
    bodies = []
    for i, check_id in enumerate(run.checks):
        parts = [frag.cases[check_id] for frag in ordered if check_id in frag.cases]
        n = dict(zip(totals, (sum(p[k] for p in parts) for k in range(1, 5))))
        seconds = 0
        for p in parts:                   # summed case by case, in the order junit_xml sums
            for s in p[5]:
                seconds += s
        suite = ET.SubElement(root, "testsuite", name=check_id, time=f"{seconds:.6f}",
                              **{k: str(v) for k, v in n.items()})
        if parts:
            suite.text = f"FLCASES{i}"
            cases = b"".join(p[0] for p in parts)
            bodies.append((f"FLCASES{i}</testsuite>".encode(), cases[:-2]))   # "\n  " last
        for k in totals:
            totals[k] += n[k]
        total_time += seconds
    for k, v in totals.items():
        root.set(k, str(v))
    root.set("time", f"{total_time:.6f}")
    ET.indent(root)
    skeleton = clean(ET.tostring(root, encoding="unicode", xml_declaration=True)) + "\n"
    data = skeleton.encode("utf-8")
    pieces, pos = [], 0
    for marker, cases in bodies:       # markers stand in the skeleton in this order
        at = data.index(marker, pos)
        pieces += [data[pos:at], _CASE_INDENT.encode(), cases, b"</testsuite>"]
        pos = at + len(marker)
    pieces.append(data[pos:])
    return b"".join(pieces)


__all__ = ["Fragment", "FragmentCache", "code_key", "fragment_key", "fragments", "junit_xml",
           "prune_folder", "quiet_collector", "result_item", "results_json", "rows_by_fluid",
           "sorted_items"]
