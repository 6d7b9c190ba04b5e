"""The raw batch contract: ``raw/fluids.toml`` and ``<batch>/batch.toml``.

A manifest is parsed with :mod:`tomllib`, validated against its JSON Schema (2020-12) in
``schemas/`` before any row is read, and then parsed into frozen pydantic models. A violation
is reported with the file, the key path and what was expected.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any

import jsonschema
from pydantic import BaseModel, ConfigDict, Field

from pipeline.errors import BatchError, ConfigError

SCHEMA_DIR = Path(__file__).resolve().parents[2] / "schemas"
QUANTITY_COLUMNS = ("rho_liquid", "rho_vapour", "rho_solid",
                    "h_vaporization", "h_fusion", "h_sublimation")
DEFAULT_PHASES = {"triple": ("vapour", "liquid", "solid"), "critical": ("liquid", "vapour")}


@lru_cache(maxsize=None)
def load_schema(name: str) -> dict:
    """A JSON Schema from ``schemas/`` (falls back to the installed package data)."""
    path = SCHEMA_DIR / name
    if path.exists():
        return json.loads(path.read_text("utf-8"))
    return json.loads(resources.files("pipeline").joinpath("schemas", name).read_text("utf-8"))


def key_path(parts) -> str:
    """Render a JSON path like ``table[0].pressure.unit``."""
    out = ""
    for part in parts:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out or "(top level)"


def schema_errors(document: Any, schema_name: str) -> list[tuple[str, str]]:
    """All violations of a schema, as (key path, what was expected), sorted by path."""
    validator = jsonschema.Draft202012Validator(load_schema(schema_name))
    found = []
    for err in validator.iter_errors(document):
        found.append((key_path(err.absolute_path), err.message))
    return sorted(found)


def read_toml(path: Path, error=BatchError) -> dict:
    """Parse a TOML file; a syntax error names the file, line and column."""
    try:
        return tomllib.loads(path.read_bytes().decode("utf-8-sig"))
    except FileNotFoundError:
        raise error("file not found", file=str(path)) from None
    except UnicodeDecodeError as err:
        raise error(f"not valid UTF-8 (byte {err.start})", file=str(path)) from None
    except tomllib.TOMLDecodeError as err:
        raise error(f"malformed TOML: {err}", file=str(path)) from None


def validated(path: Path, schema_name: str, error=BatchError) -> dict:
    """Parse and validate a manifest; raise ``error`` listing every violation."""
    document = read_toml(path, error)
    problems = schema_errors(document, schema_name)
    if problems:
        key, what = problems[0]
        more = f" (and {len(problems) - 1} more: " + "; ".join(
            f"{k}: {w}" for k, w in problems[1:4]) + ")" if len(problems) > 1 else ""
        raise error(f"does not match {schema_name}: {what}{more}", file=str(path), key=key)
    return document


def canonical_hash(obj: Any) -> str:
    """SHA-256 of sort-keyed compact JSON: the fingerprint used for inputs everywhere."""
    text = json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class _Frozen(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid", populate_by_name=True)


class QuantityValue(_Frozen):
    value: float
    unit: str


class Fluid(_Frozen):
    id: str
    name: str
    formula: str = ""
    cas_rn: str = ""
    solid_phases: tuple[str, ...] = ()
    molar_mass: QuantityValue

    @property
    def molar_mass_kg_mol(self) -> float:
        return self.molar_mass.value * (1e-3 if self.molar_mass.unit == "g/mol" else 1.0)


class Source(_Frozen):
    id: str
    kind: str
    citation: str
    doi: str = ""
    license: str = ""
    notes: str = ""


class ColumnSpec(_Frozen):
    column: str
    unit: str
    scale: str = "ITS-90"
    reference: str = "absolute"
    ambient: QuantityValue | None = None


class UncertaintySpec(_Frozen):
    unit: str = "1"
    value: float | None = None
    relative: float | None = None
    column: str | None = None
    coverage: float = 1.0


class TableSpec(_Frozen):
    file: str
    fluid: str
    boundary: str
    solid_phase: str = ""
    temperature: ColumnSpec
    pressure: ColumnSpec | None = None
    delimiter: str = ","
    decimal: str = "."
    encoding: str = "utf-8"
    quote: str = '"'
    comment: str = ""
    null_values: tuple[str, ...] = ()
    extra_columns: str = "error"
    sheet: str = ""                      # workbook tables: the worksheet (pipeline.ingest.workbook)
    header_row: int | None = None        # workbook tables: spreadsheet row of the header
    range: str = ""                      # workbook tables: optional cell range, e.g. B3:E40
    uncertainty: dict[str, UncertaintySpec] = Field(default_factory=dict)
    columns: dict[str, ColumnSpec] = Field(default_factory=dict)

    def value_columns(self) -> dict[str, ColumnSpec]:
        """quantity -> column spec, the boundary pressure first."""
        out = {"pressure": self.pressure} if self.pressure else {}
        out.update(self.columns)
        return out


class PointValue(_Frozen):
    value: float
    unit: str
    u: float | None = None
    coverage: float = 1.0
    scale: str = "ITS-90"
    reference: str = "absolute"
    ambient: QuantityValue | None = None


class FixedPointSpec(_Frozen):
    fluid: str
    kind: str
    phases: tuple[str, ...] = ()
    T: PointValue
    p: PointValue | None = None
    rho: PointValue | None = None

    def phase_list(self) -> tuple[str, ...]:
        return self.phases or DEFAULT_PHASES[self.kind]


class ConstantSpec(_Frozen):
    fluid: str
    name: str
    value: float
    unit: str
    u: float | None = None
    coverage: float = 1.0
    scale: str = "ITS-90"


class BatchManifest(_Frozen):
    format_version: int = 1
    source: Source
    table: tuple[TableSpec, ...] = ()
    fixed_point: tuple[FixedPointSpec, ...] = ()
    constant: tuple[ConstantSpec, ...] = ()


def load_fluids(path: Path) -> dict[str, Fluid]:
    """``raw/fluids.toml`` validated and parsed; duplicate ids are an error."""
    doc = validated(path, "fluids.schema.json", ConfigError)
    fluids: dict[str, Fluid] = {}
    for i, entry in enumerate(doc["fluid"]):
        fluid = Fluid.model_validate(entry)
        if fluid.id in fluids:
            raise ConfigError(f"fluid id '{fluid.id}' is listed twice", file=str(path),
                              key=f"fluid[{i}].id")
        fluids[fluid.id] = fluid
    return fluids


def load_batch(path: Path) -> tuple[BatchManifest, dict]:
    """A batch.toml validated and parsed; returns the model and the raw document."""
    doc = validated(path, "batch.schema.json")
    return BatchManifest.model_validate(doc), doc
