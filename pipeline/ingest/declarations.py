"""Every unit, scale and phase a batch.toml declares is checked before any row is read.

An unknown, misspelt or dimensionally wrong unit, a refused scale, an undeclared solid phase
or a comment character that is also the delimiter refuses the batch, naming its key.
"""

from __future__ import annotations

import numpy as np

from pipeline.errors import BatchError, ScaleError, UnitError
from pipeline.ingest.contract import BatchManifest, Fluid
from pipeline.ingest.normalise import QUANTITY_KIND
from pipeline.ingest.points import CONSTANT_KIND
from pipeline.ingest.scales import get_scale
from pipeline.ingest.units import conversion


def _declared(label: str, key: str, check):
    """Run ``check()``; a unit or scale error is re-raised naming the batch.toml key."""
    try:
        return check()
    except (UnitError, ScaleError) as err:
        raise type(err)(err.detail, file=label, key=key) from None


def _column_rule(label: str, key: str, v, kind: str, molar_mass: float) -> None:
    """Check the unit (with its reference and ambient) of one column or point value."""
    ambient = None
    if v.ambient is not None:
        ambient = _declared(label, f"{key}.ambient.unit", lambda: conversion(
            v.ambient.unit, "pressure").apply(np.array([v.ambient.value]))[0])
        if v.reference == "gauge" and not (np.isfinite(ambient) and ambient > 0):
            raise UnitError(f"the ambient pressure of a gauge value must be positive, got "
                            f"{v.ambient.value} {v.ambient.unit}", file=label, key=f"{key}.ambient")
    _declared(label, f"{key}.unit", lambda: conversion(
        v.unit, kind, molar_mass_kg_mol=molar_mass, reference=v.reference, ambient_Pa=ambient))


def check_declarations(manifest: BatchManifest, fluids: dict[str, Fluid], label: str) -> None:
    """Every unit and scale in batch.toml converts, before any row is read; an unknown,
    misspelt or dimensionally wrong unit, or a refused scale, names its key."""
    for i, t in enumerate(manifest.table):
        M = fluids[t.fluid].molar_mass_kg_mol
        key = f"table[{i}]"
        if t.solid_phase:
            _declared_phase(t.solid_phase, fluids[t.fluid], label, f"{key}.solid_phase")
        if t.comment and t.comment in (t.delimiter, t.quote, t.decimal):
            raise BatchError(f"comment character {t.comment!r} is also the table's delimiter, "
                             "quote or decimal separator", file=label, key=f"{key}.comment")
        _declared(label, f"{key}.temperature.unit", lambda: conversion(t.temperature.unit,
                                                                      "temperature"))
        _declared(label, f"{key}.temperature.scale", lambda: get_scale(t.temperature.scale))
        for q, cs in t.value_columns().items():
            where = f"{key}.pressure" if q == "pressure" else f"{key}.columns.{q}"
            _column_rule(label, where, cs, QUANTITY_KIND[q][0], M)
        for q, u in t.uncertainty.items():
            if u.relative is None:
                kind = "temperature" if q == "temperature" else QUANTITY_KIND[q][0]
                _declared(label, f"{key}.uncertainty.{q}.unit", lambda: conversion(
                    u.unit, kind, molar_mass_kg_mol=M, difference=True))
    kinds = {"T": "temperature", "p": "pressure", "rho": "density"}
    for i, fp in enumerate(manifest.fixed_point):
        M = fluids[fp.fluid].molar_mass_kg_mol
        for j, phase in enumerate(fp.phases):
            if phase not in GENERIC_PHASES:
                _declared_phase(phase, fluids[fp.fluid], label, f"fixed_point[{i}].phases[{j}]")
        for name, kind in kinds.items():
            v = getattr(fp, name)
            if v is not None:
                _column_rule(label, f"fixed_point[{i}].{name}", v, kind, M)
        _declared(label, f"fixed_point[{i}].T.scale", lambda: get_scale(fp.T.scale))
    for i, c in enumerate(manifest.constant):
        kind = CONSTANT_KIND[c.name][0]
        _declared(label, f"constant[{i}].unit", lambda: conversion(
            c.unit, kind, molar_mass_kg_mol=fluids[c.fluid].molar_mass_kg_mol))
        if kind == "temperature":
            _declared(label, f"constant[{i}].scale", lambda: get_scale(c.scale))


#: Phase names every fluid has; polymorph labels (Ih, III...) must be declared in fluids.toml
GENERIC_PHASES = ("vapour", "liquid", "solid")


def _declared_phase(phase: str, fluid: Fluid, label: str, key: str) -> None:
    """A solid-phase label must be one the fluid declares in fluids.toml."""
    if phase not in fluid.solid_phases:
        declared = (f"it declares {list(fluid.solid_phases)}" if fluid.solid_phases
                    else "it declares none")
        raise BatchError(f"solid phase {phase!r} is not declared for fluid '{fluid.id}' in "
                         f"fluids.toml ({declared}); add it to its solid_phases",
                         file=label, key=key)
