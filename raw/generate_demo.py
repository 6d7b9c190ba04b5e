#!/usr/bin/env python3
"""Build the FluidLedger demo data set: ``raw/fluids.toml`` and every generated batch folder.

Run ``python raw/generate_demo.py`` (from anywhere) to rebuild ``raw/`` in place, or
``python raw/generate_demo.py OUT_DIR`` to write the same files somewhere else. The output is
deterministic: a fixed seed, one random stream per batch (so editing one batch leaves the
others byte-identical), fixed number formats and ``\\n`` line endings.

Two kinds of batch are written (raw/README.md explains each one):

* **Published equations, evaluated** -- the IAPWS releases for water and the ancillary
  equations of the reference equations of state for carbon dioxide, nitrogen and argon,
  evaluated on a fixed temperature grid through :mod:`pipeline.correlations.reference`
  (this file holds no copy of any equation), plus the published fixed points.
* **Invented laboratory campaigns** of the fictional firm "Brackenridge Cryogenic & Process
  Engineering" (rig A, rig B) and two fictional literature sources: reference values plus
  noise drawn from the stated standard uncertainties, in mixed units and CSV dialects, with
  the planted flaws listed in docs/interfaces.md.

Every batch folder written here starts its ``batch.toml`` with :data:`MARKER`. Before writing,
generated folders that are no longer produced are removed (folders without the marker are
never touched), and each produced folder is rewritten from scratch.
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

RAW_DIR = Path(__file__).resolve().parent
REPO_ROOT = RAW_DIR.parent
for folder in (REPO_ROOT, RAW_DIR):      # pipeline/ and the demo_scenarios package
    if str(folder) not in sys.path:
        sys.path.insert(0, str(folder))

from demo_scenarios.argon import argon_ancillaries, argon_rig_b_ipts68  # noqa: E402
from demo_scenarios.carbon_dioxide import (  # noqa: E402
    co2_ancillaries, co2_melting_literature, co2_rig_a, co2_rig_b, co2_triple_point_estimate,
)
from demo_scenarios.common import FLUIDS_TOML, KPA, MARKER, MPA, Batch  # noqa: E402
from demo_scenarios.nitrogen import (  # noqa: E402
    nitrogen_ancillaries, nitrogen_critical_literature, nitrogen_rig_a_gauge,
    nitrogen_rig_b_kpa_as_pa, nitrogen_rig_c_workbook,
)
from demo_scenarios.water import (  # noqa: E402
    water_melting_sublimation, water_rig_a_semicolon, water_rig_b_celsius_as_kelvin,
    water_saturation, water_triple_point_properties,
)
from pipeline.correlations.reference import REFERENCE_CONSTANTS  # noqa: E402

# ----------------------------------------------------------------------------------------
# Assembly
# ----------------------------------------------------------------------------------------
BUILDERS = (
    water_saturation, water_melting_sublimation, water_triple_point_properties,
    co2_ancillaries, co2_triple_point_estimate, nitrogen_ancillaries, argon_ancillaries,
    co2_rig_a, co2_rig_b, argon_rig_b_ipts68, nitrogen_rig_a_gauge, nitrogen_rig_b_kpa_as_pa,
    nitrogen_rig_c_workbook,
    water_rig_a_semicolon, water_rig_b_celsius_as_kelvin, co2_melting_literature,
    nitrogen_critical_literature,
)


PRESSURE_UNITS = {"Pa": 1.0, "kPa": KPA, "MPa": MPA}


def check_reference_fixed_points(batches: list[Batch]) -> None:
    """The fixed points of the standard/evaluated batches equal REFERENCE_CONSTANTS."""
    for b in batches:
        if b.source["kind"] not in ("standard", "evaluated"):
            continue
        for _, fp in b.fixed_points:
            ref = REFERENCE_CONSTANTS[fp["fluid"]]
            T, p = fp["T"]["value"], fp["p"]["value"] * PRESSURE_UNITS[fp["p"]["unit"]]
            if fp["kind"] == "critical":
                expected = [(T, ref["Tc_K"]), (p, ref["pc_Pa"]), (fp["rho"]["value"], ref["rhoc_kg_m3"])]
            else:
                match = [tp for tp in ref["triple_points"] if tp["phases"] == fp["phases"]]
                if not match:
                    raise RuntimeError(f"{b.name}: triple point {fp['phases']} not in REFERENCE_CONSTANTS")
                expected = [(T, match[0]["T_K"]), (p, match[0]["p_Pa"])]
            for got, want in expected:
                if abs(got - want) > 1e-9 * abs(want):
                    raise RuntimeError(f"{b.name}: fixed point {fp} differs from REFERENCE_CONSTANTS")


def build() -> list[Batch]:
    """Every demo batch, in a fixed order."""
    batches = [builder() for builder in BUILDERS]
    check_reference_fixed_points(batches)
    names = [b.name for b in batches]
    if len(set(names)) != len(names):
        raise RuntimeError(f"duplicate batch names: {names}")
    for b in batches:
        if b.source["id"] != b.name:
            raise RuntimeError(f"batch {b.name}: source id {b.source['id']} differs from the folder")
    return batches


def is_generated(folder: Path) -> bool:
    """A batch folder written by this generator (its batch.toml starts with the marker)."""
    manifest = folder / "batch.toml"
    if not manifest.is_file():
        return False
    with manifest.open("r", encoding="utf-8", errors="replace") as fh:
        return fh.readline().rstrip("\n") == MARKER


def generate(out_dir: Path) -> list[str]:
    """Write fluids.toml and every demo batch into ``out_dir``; return the batch folder names.

    Generated folders no longer produced are removed; produced folders are rewritten from
    scratch; anything else in ``out_dir`` (README.md, this script, hand-made batches) is kept.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    batches = build()                                   # compute everything before touching disk
    wanted = {b.name for b in batches}
    for child in sorted(out_dir.iterdir()):
        if child.is_dir() and is_generated(child) and child.name not in wanted:
            shutil.rmtree(child)
    (out_dir / "fluids.toml").write_bytes(FLUIDS_TOML.encode("utf-8"))
    for b in batches:
        folder = out_dir / b.name
        if folder.exists():
            if not is_generated(folder):
                raise RuntimeError(f"{folder} exists and was not written by this generator")
            shutil.rmtree(folder)
        folder.mkdir()
        for file, text in b.files().items():
            (folder / file).write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    return [b.name for b in batches]


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    out = Path(argv[0]) if argv else RAW_DIR
    names = generate(out)
    print(f"wrote fluids.toml and {len(names)} batches to {out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())