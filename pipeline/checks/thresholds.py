"""Thresholds in force: package defaults, per-fluid overrides, and an optional user file.

Layout of ``thresholds.toml`` (the package defaults) and of a user file given with
``--config``::

    ["triple-point.on-curves"]        # one table per check id: named thresholds
    z_max = 3.0
    severity = "fail"                 # optional: overrides the check's default severity

    [fluid.water."triple-point.on-curves"]   # per-fluid override of some keys
    z_max = 4.0

A user file may only set keys the package defaults define (a typo is an error, not a silently
ignored setting); its values replace the defaults, its per-fluid tables add to the package's.
"""

from __future__ import annotations

import math
import re
import tomllib
from importlib import resources
from pathlib import Path
from typing import Any, Iterable, Mapping

import numpy as np

from pipeline.errors import ConfigError
from pipeline.checks.findings import SEVERITIES

DEFAULTS_FILE = "thresholds.toml"
_FLUID_KEY = "fluid"
_TABLE = re.compile(r'^\[\s*"([^"]+)"\s*\]\s*$')
_KEY_NOTE = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)\s*=[^#]*#\s*(.+)$")


def _read_toml(path: Path | None) -> tuple[dict, str]:
    if path is None:
        text = resources.files(__package__).joinpath(DEFAULTS_FILE).read_text("utf-8")
        return tomllib.loads(text), f"pipeline/checks/{DEFAULTS_FILE}"
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh), str(path)
    except FileNotFoundError:
        raise ConfigError("threshold file not found", file=str(path)) from None
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"not valid TOML: {err}", file=str(path)) from None


def threshold_notes() -> dict[str, dict[str, str]]:
    """The comment beside each key of the package defaults: check id -> key -> note."""
    text = resources.files(__package__).joinpath(DEFAULTS_FILE).read_text("utf-8")
    notes: dict[str, dict[str, str]] = {}
    table = None
    for line in text.splitlines():
        if m := _TABLE.match(line.strip()):
            table = notes.setdefault(m.group(1), {})
        elif line.lstrip().startswith("["):
            table = None
        elif table is not None and (m := _KEY_NOTE.match(line.strip())):
            table[m.group(1)] = m.group(2).strip()
    return notes


def _same_kind(default: Any, value: Any) -> bool:
    number = (int, float)
    if isinstance(default, bool) or isinstance(value, bool):
        return isinstance(default, bool) and isinstance(value, bool)
    if isinstance(default, number):
        return isinstance(value, number)
    return type(default) is type(value)


class Thresholds:
    """Named thresholds per check, with per-fluid overrides (see the module docstring)."""

    def __init__(self, defaults: Mapping[str, Mapping[str, Any]],
                 per_fluid: Mapping[str, Mapping[str, Mapping[str, Any]]] | None = None,
                 files: Iterable[str] = ()):
        self._defaults = {c: dict(v) for c, v in defaults.items()}
        self._per_fluid = {f: {c: dict(v) for c, v in t.items()} for f, t in (per_fluid or {}).items()}
        self.files = tuple(files)
        self._cache: dict[tuple[str, str | None], dict] = {}

    # -- loading -------------------------------------------------------------------------------
    @classmethod
    def load(cls, user_file: str | Path | None = None, *,
             severities: Mapping[str, str] | None = None) -> "Thresholds":
        """Package defaults merged with ``user_file``; ``severities`` are the checks' defaults."""
        if severities is None:
            from pipeline.checks.registry import all_checks

            severities = {cid: spec.severity for cid, spec in all_checks().items()}
        raw, name = _read_toml(None)
        defaults, per_fluid = cls._split(raw, name, None)
        for check_id, severity in severities.items():
            defaults.setdefault(check_id, {}).setdefault("severity", severity)
        files = [name]
        if user_file is not None:
            raw, uname = _read_toml(Path(user_file))
            user_defaults, user_fluid = cls._split(raw, uname, defaults)
            for check_id, table in user_defaults.items():
                defaults[check_id].update(table)
            for fluid_id, tables in user_fluid.items():
                for check_id, table in tables.items():
                    per_fluid.setdefault(fluid_id, {}).setdefault(check_id, {}).update(table)
            files.append(uname)
        cls._validate_fluid_tables(per_fluid, defaults, files[-1])
        return cls(defaults, per_fluid, files)

    @staticmethod
    def _split(raw: dict, name: str, known: Mapping[str, Mapping] | None):
        """Split a parsed file into check tables and per-fluid tables, validating the former."""
        per_fluid = raw.pop(_FLUID_KEY, {})
        if not isinstance(per_fluid, dict):
            raise ConfigError("'fluid' must be a table of [fluid.<id>.\"<check-id>\"] tables",
                              file=name, key=_FLUID_KEY)
        checks = {}
        for check_id, table in raw.items():
            if not isinstance(table, dict):
                raise ConfigError("expected a table of thresholds", file=name, key=check_id)
            if known is not None:
                Thresholds._validate_table(check_id, table, known, name)
            checks[check_id] = dict(table)
        return checks, {f: dict(t) for f, t in per_fluid.items()}

    @staticmethod
    def _validate_table(check_id: str, table: Mapping, known: Mapping[str, Mapping], name: str,
                        fluid_id: str | None = None) -> None:
        where = f"fluid.{fluid_id}.{check_id}" if fluid_id else check_id
        if check_id not in known:
            raise ConfigError(f"unknown check id; valid ids: {', '.join(known)}", file=name,
                              key=where)
        for key, value in table.items():
            if key not in known[check_id]:
                valid = ", ".join(known[check_id]) or "(none)"
                raise ConfigError(f"unknown threshold; valid keys: {valid}", file=name,
                                  key=f"{where}.{key}")
            if not _same_kind(known[check_id][key], value):
                raise ConfigError(f"value {value!r} has the wrong type (default is "
                                  f"{known[check_id][key]!r})", file=name, key=f"{where}.{key}")
            if isinstance(value, float) and not math.isfinite(value):
                raise ConfigError(f"value {value!r} is not a finite number (NaN and infinity "
                                  "would make every comparison false)", file=name,
                                  key=f"{where}.{key}")
        if "severity" in table and table["severity"] not in SEVERITIES:
            raise ConfigError(f"severity {table['severity']!r} is not one of {SEVERITIES}",
                              file=name, key=f"{where}.severity")

    @classmethod
    def _validate_fluid_tables(cls, per_fluid, defaults, name) -> None:
        for fluid_id, tables in per_fluid.items():
            if not isinstance(tables, dict):
                raise ConfigError("expected tables of thresholds", file=name,
                                  key=f"fluid.{fluid_id}")
            for check_id, table in tables.items():
                if not isinstance(table, dict):
                    raise ConfigError("expected a table of thresholds", file=name,
                                      key=f"fluid.{fluid_id}.{check_id}")
                cls._validate_table(check_id, table, defaults, name, fluid_id)

    # -- lookup --------------------------------------------------------------------------------
    def check_ids(self) -> list[str]:
        return list(self._defaults)

    def for_check(self, check_id: str, fluid_id: str | None = None) -> dict[str, Any]:
        """Thresholds of ``check_id`` in force for ``fluid_id`` (defaults when None)."""
        key = (check_id, fluid_id)
        if key not in self._cache:
            merged = dict(self._defaults.get(check_id, {}))
            if fluid_id is not None:
                merged.update(self._per_fluid.get(fluid_id, {}).get(check_id, {}))
            self._cache[key] = merged
        return self._cache[key]

    def overrides(self, check_id: str) -> dict[str, dict[str, Any]]:
        """Per-fluid overrides of ``check_id``: fluid id -> the keys it changes."""
        return {f: dict(t[check_id]) for f, t in sorted(self._per_fluid.items()) if check_id in t}

    def view(self, check_id: str) -> "ThresholdView":
        return ThresholdView(self, check_id)


class ThresholdView:
    """Thresholds of one check: ``view(fluid_id)`` is a mapping; ``view.array`` a column."""

    def __init__(self, thresholds: Thresholds, check_id: str):
        self.thresholds, self.check_id = thresholds, check_id
        self._overridden = set(thresholds.overrides(check_id))

    def __call__(self, fluid_id: str | None = None) -> dict[str, Any]:
        """The thresholds in force for ``fluid_id``: one shared mapping for every fluid without
        overrides (do not change it)."""
        if fluid_id is not None and fluid_id not in self._overridden:
            fluid_id = None
        return self.thresholds.for_check(self.check_id, fluid_id)

    def __getitem__(self, key: str) -> Any:
        return self()[key]

    def array(self, key: str, fluid_ids: Iterable[str]) -> np.ndarray:
        """Threshold ``key`` for each of ``fluid_ids`` (vectorised checks)."""
        ids = list(fluid_ids)
        default = self()[key]
        if not self._overridden:
            return np.full(len(ids), default, dtype=float)
        return np.array([self(f)[key] if f in self._overridden else default for f in ids],
                        dtype=float)
