"""Raw folders and stores for tests and benchmarks, built from a spec in one place.

A batch is given as Python values (``source``, ``table`` and fixed-point dicts) and written as
batch.toml by :func:`batch_toml` (tomlkit, a product dependency), so a test states what its
batch holds instead of repeating a TOML template. :func:`build_store` writes the batches
and runs the stages a test needs on a fresh store.
"""

from __future__ import annotations

import textwrap
from pathlib import Path
from typing import Iterable, Mapping, Sequence

import tomlkit

from pipeline.fitting.stage import run_fit
from pipeline.ingest.stage import run_ingest
from pipeline.store import open_store

FLUIDS_TOML = """
[[fluid]]
id = "water"
name = "water"
formula = "H2O"
cas_rn = "7732-18-5"
solid_phases = ["Ih", "III"]
molar_mass = { value = 18.015268, unit = "g/mol" }   # IAPWS-95

[[fluid]]
id = "argon"
name = "argon"
formula = "Ar"
cas_rn = "7440-37-1"
molar_mass = { value = 39.948, unit = "g/mol" }      # Tegeler, Span & Wagner (1999)
"""

TEGELER_1999 = "Tegeler, Span & Wagner, J. Phys. Chem. Ref. Data 28, 779 (1999)"

#: Argon's critical point as published with its reference equation (Tegeler, Span & Wagner,
#: J. Phys. Chem. Ref. Data 28, 779 (1999)); the u are the demo's assignments.
ARGON_CRITICAL = {"fluid": "argon", "kind": "critical",
                  "T": {"value": 150.687, "unit": "K", "u": 0.015},
                  "p": {"value": 4.863, "unit": "MPa", "u": 0.003}}


def source(source_id: str, citation: str, kind: str = "measurement") -> dict:
    """The ``[source]`` table of a batch."""
    return {"id": source_id, "kind": kind, "citation": citation}


def vp_table(*, fluid: str = "argon", file: str = "vp.csv", p_unit: str = "kPa",
             u_p_rel: float | None = 0.001, u_T_K: float | None = None,
             boundary: str = "liquid-vapour", **extra) -> dict:
    """A ``[[table]]`` of columns ``T`` [K] and ``p`` [p_unit] with a relative u(p) (None:
    not stated) and optionally an absolute u(T); ``extra`` adds keys (``columns``...)."""
    uncertainty: dict = {}
    if u_T_K is not None:
        uncertainty["temperature"] = {"value": u_T_K, "unit": "K"}
    if u_p_rel is not None:
        uncertainty["pressure"] = {"relative": u_p_rel}
    table = {"file": file, "fluid": fluid, "boundary": boundary,
             "temperature": {"column": "T", "unit": "K"},
             "pressure": {"column": "p", "unit": p_unit}}
    if uncertainty:
        table["uncertainty"] = uncertainty
    return {**table, **extra}


def batch_toml(src: Mapping, tables: Sequence[Mapping] = (), fixed_points: Sequence[Mapping] = (),
               constants: Sequence[Mapping] = (), *, format_version: int | None = 1) -> str:
    """batch.toml text of a batch (a non-finite number is written as TOML's ``nan``/``inf``)."""
    doc: dict = {} if format_version is None else {"format_version": format_version}
    doc["source"] = dict(src)
    for key, items in (("table", tables), ("fixed_point", fixed_points),
                       ("constant", constants)):
        if items:
            doc[key] = [dict(i) for i in items]
    return tomlkit.dumps(doc)


def write_batch(root: Path, name: str, manifest: str, files: Mapping[str, str | bytes] = {}
                ) -> Path:
    """Write raw/<name>/batch.toml and its files; return the batch folder."""
    folder = root / name
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "batch.toml").write_text(textwrap.dedent(manifest), encoding="utf-8")
    for fname, content in files.items():
        target = folder / fname
        if isinstance(content, bytes):
            target.write_bytes(content)
        else:
            target.write_text(content, encoding="utf-8")
    return folder


def write_raw(root: Path, batches: Mapping[str, tuple[str, Mapping[str, str | bytes]]],
              fluids_toml: str = FLUIDS_TOML) -> Path:
    """A raw folder: fluids.toml and each batch ``name -> (batch.toml text, files)``."""
    root.mkdir(parents=True, exist_ok=True)
    (root / "fluids.toml").write_text(fluids_toml, encoding="utf-8")
    for name, (manifest, files) in batches.items():
        write_batch(root, name, manifest, files)
    return root


def build_store(store_path: Path, raw_roots: Iterable[Path], *,
                stages: Sequence[str] = ("ingest",), fluids_file: Path | None = None) -> Path:
    """Run the named stages (``ingest``, ``fit``) in order on the store at ``store_path``;
    return the path."""
    with open_store(store_path) as s:
        for stage in stages:
            if stage == "ingest":
                kw = {"fluids_file": fluids_file} if fluids_file else {}
                run_ingest(s.con, list(raw_roots), **kw)
            elif stage == "fit":
                run_fit(s.con)
            else:
                raise ValueError(f"unknown stage {stage!r}")
    return store_path
