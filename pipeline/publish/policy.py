"""The recommendation policy (``policy.toml``) and the curation decisions a release honours.

The policy is data: a TOML file parsed into frozen pydantic models that refuse unknown keys,
so a misspelt key is an error rather than a silently ignored setting. :class:`Decisions` is
the hook for curation (issue 8): sources excluded per fluid and constant, a preferred source
per constant, each with the decision id that is written into the provenance of every value
it shapes. Both have a canonical ``asdict()`` that enters the release fingerprint.
"""

from __future__ import annotations

import hashlib
import json
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Mapping

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from pipeline.errors import ConfigError

POLICY_FILE = "policy.toml"
SOURCE_KINDS = ("standard", "evaluated", "literature", "measurement", "estimate")
DERIVED = "derived"
"""Pseudo-kind of candidates computed from fitted curves; placed in ``kind_rank`` like a kind."""


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Ranking(_Strict):
    kind_rank: tuple[str, ...]

    @field_validator("kind_rank")
    @classmethod
    def _every_kind_once(cls, v: tuple[str, ...]) -> tuple[str, ...]:
        expected = set(SOURCE_KINDS) | {DERIVED}
        if sorted(v) != sorted(expected):
            raise ValueError(f"kind_rank must list each of {sorted(expected)} exactly once, "
                             f"got {list(v)}")
        return v


class Combination(_Strict):
    expand_by_birge_ratio: bool
    one_candidate_per_source: bool


class Exclusions(_Strict):
    exclude_discrepant_sources: bool
    exclude_derived_from_failed_fits: bool


class Derived(_Strict):
    normal_boiling_pressure_Pa: float = Field(gt=0)
    acentric_reduced_temperature: float = Field(gt=0, lt=1)
    max_extrapolation_K: float = Field(ge=0)


class Enthalpy(_Strict):
    triple_T_tolerance_K: float = Field(ge=0)


class Policy(_Strict):
    """The recommendation policy; see the comments in ``pipeline/publish/policy.toml``."""

    ranking: Ranking
    combination: Combination
    exclusions: Exclusions
    derived: Derived
    enthalpy: Enthalpy

    def rank(self, kind: str) -> int:
        """Position of a source kind (or ``derived``) in the ranking, best = 0."""
        return self.ranking.kind_rank.index(kind) if kind in self.ranking.kind_rank \
            else len(self.ranking.kind_rank)

    def asdict(self) -> dict:
        return self.model_dump(mode="json")

    @property
    def sha256(self) -> str:
        return hashlib.sha256(json.dumps(self.asdict(), sort_keys=True).encode()).hexdigest()

    @classmethod
    def load(cls, path: str | Path | None = None) -> "Policy":
        """Read the package policy, or the file at ``path``; errors name the file and key."""
        where = str(path) if path else f"pipeline/publish/{POLICY_FILE}"
        try:
            if path is None:
                data = tomllib.loads(resources.files(__package__).joinpath(POLICY_FILE)
                                     .read_text("utf-8"))
            else:
                data = tomllib.loads(Path(path).read_text("utf-8"))
        except FileNotFoundError:
            raise ConfigError("policy file not found", file=where) from None
        except tomllib.TOMLDecodeError as err:
            raise ConfigError(f"not valid TOML: {err}", file=where) from None
        try:
            return cls.model_validate(data)
        except ValidationError as err:
            first = err.errors()[0]
            key = ".".join(str(p) for p in first["loc"])
            raise ConfigError(f"{first['msg']} ({len(err.errors())} problem(s))", file=where,
                              key=key) from None


@dataclass(frozen=True)
class Decisions:
    """Curation decisions honoured by the recommendation (default: none).

    Parameters
    ----------
    exclude : mapping
        ``(fluid_id, key) -> {source_id: decision_id}``: candidates of ``source_id`` are left
        out of the constant ``key`` (``"<point>|<property>"`` as in check subjects, e.g.
        ``"critical:vapour,liquid|Tc"``, ``"constant|normal_boiling_T"``; ``"*"`` for every
        constant of the fluid).
    prefer : mapping
        ``(fluid_id, key) -> (source_id, decision_id)``: that source's candidate is recommended
        alone whenever it has one.
    """

    exclude: Mapping[tuple[str, str], Mapping[str, str]] = field(default_factory=dict)
    prefer: Mapping[tuple[str, str], tuple[str, str]] = field(default_factory=dict)

    def excluded(self, fluid_id: str, key: str) -> dict[str, str]:
        """Sources excluded for this constant -> the decision id that excluded each."""
        out = dict(self.exclude.get((fluid_id, "*"), {}))
        out.update(self.exclude.get((fluid_id, key), {}))
        return out

    def preferred(self, fluid_id: str, key: str) -> tuple[str, str] | None:
        return self.prefer.get((fluid_id, key))

    def restricted(self, fluids) -> "Decisions":
        """The decisions about some fluids only (all a release's rows of them can depend on)."""
        keep = set(fluids)
        return Decisions({k: v for k, v in self.exclude.items() if k[0] in keep},
                         {k: v for k, v in self.prefer.items() if k[0] in keep})

    def asdict(self) -> dict:
        return {
            "exclude": sorted([f, k, s, d] for (f, k), m in self.exclude.items()
                              for s, d in m.items()),
            "prefer": sorted([f, k, s, d] for (f, k), (s, d) in self.prefer.items()),
        }


NO_DECISIONS = Decisions()
