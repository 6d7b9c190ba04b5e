"""The check inputs as tables: their columns and defaults, and the frames built from rows.

:data:`OBS_COLUMNS`, :data:`FIXED_POINT_COLUMNS` and :data:`CONSTANT_COLUMNS` are what the
checks read (the store loader's queries select them; in-memory data get the defaults given
here); :func:`normalise_observations` makes a frame of them from any rows, and
:func:`sample_series` observations sampled from a curve (tests, benchmarks).
"""

from __future__ import annotations

import math
from typing import Any, Mapping, Sequence

import numpy as np
import pandas as pd

#: Observation columns and the default used by :meth:`FluidData.build` when one is missing.
OBS_COLUMNS: dict[str, Any] = {
    "obs_id": None, "boundary": None, "solid_phase": "", "quantity": "pressure",
    "T_K": None, "u_T_K": math.nan, "value_si": None, "u_value_si": math.nan,
    "source_id": "memory", "source_kind": "literature", "file_path": None, "file_sha256": "",
    "row_number": None, "T_unit": "K", "T_scale": "ITS-90", "value_unit": None,
    "fit_id": None, "z": math.nan, "is_outlier": False, "excluded_by": None,
}
FIXED_POINT_COLUMNS: dict[str, Any] = {
    "fp_id": None, "kind": None, "phases": None, "T_K": None, "u_T_K": math.nan,
    "p_Pa": math.nan, "u_p_Pa": math.nan, "rho_kg_m3": math.nan, "u_rho_kg_m3": math.nan,
    "source_id": "memory", "source_kind": "literature", "file_path": "memory/batch.toml",
}
CONSTANT_COLUMNS: dict[str, Any] = {
    "const_id": None, "name": None, "value_si": None, "u_si": math.nan, "si_unit": "",
    "source_id": "memory", "source_kind": "literature", "file_path": "memory/batch.toml",
}
SI_UNIT = {"pressure": "Pa", "rho_liquid": "kg/m^3", "rho_vapour": "kg/m^3",
           "rho_solid": "kg/m^3", "h_vaporization": "J/mol", "h_fusion": "J/mol",
           "h_sublimation": "J/mol"}
_FLOAT_OBS = ("T_K", "u_T_K", "value_si", "u_value_si", "z")
#: text columns kept as numpy object arrays: checks index them per fluid, and pandas' Arrow
#: strings make each such access an Arrow 'take' (measured ~10x slower in the benchmark)
_TEXT_OBS = ("boundary", "solid_phase", "quantity", "source_id", "source_kind", "file_path",
             "file_sha256", "T_unit", "T_scale", "value_unit", "fit_id", "excluded_by")
_SEP = "\x1f"
#: integer codes kept beside the observation columns: name -> the text column coded
CODE_COLUMNS = {"file_code": "file_path", "kind_code": "source_kind"}


def with_codes(columns: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """``columns`` with each text column interned (rows of equal text share one string
    object: gathers and comparisons touch a few objects, not one per row) and the
    :data:`CODE_COLUMNS` added (equal codes, equal text), so rows are grouped by file or
    source kind with integer comparisons."""
    codes = {}
    for name in _TEXT_OBS:
        col = columns[name]
        c, uniques = pd.factorize(col, sort=False)
        if len(uniques) < len(col):
            shared = np.empty(len(uniques) + 1, dtype=object)
            shared[:-1] = np.asarray(uniques, dtype=object)
            shared[-1] = None
            interned = shared[c]               # code -1 (a missing value) -> None, as before
            missing = c < 0
            if missing.any():                  # keep a missing value as it was (None or NaN)
                interned[missing] = col[missing]
            columns[name] = interned
        codes[name] = c.astype(np.int64)
    for code, text in CODE_COLUMNS.items():
        columns[code] = codes[text]
    return columns


def _records(frame: pd.DataFrame) -> list[dict]:
    """Rows as dicts of plain Python values (``to_dict("records")`` is ~20x slower here)."""
    cols = list(frame.columns)
    return [dict(zip(cols, row)) for row in zip(*(frame[c].tolist() for c in cols))]


def _frame(rows, columns: Mapping[str, Any], id_col: str, keep: Sequence[str] = ()) -> pd.DataFrame:
    """``rows`` with every column of ``columns`` (defaults filled) plus the ``keep`` columns."""
    frame = pd.DataFrame(rows if rows is not None else [], columns=None)
    for col, default in columns.items():
        if col not in frame:
            frame[col] = default
        elif isinstance(default, (str, bool)) and frame[col].isna().any():
            frame[col] = frame[col].where(frame[col].notna(), default)
    if len(frame) and frame[id_col].isna().any():
        frame[id_col] = np.arange(1, len(frame) + 1)
    frame = frame[list(keep) + list(columns)].reset_index(drop=True)
    text = [c for c in frame if pd.api.types.is_string_dtype(frame[c]) and frame[c].dtype != object]
    return frame.astype({c: object for c in text}) if text else frame


def normalise_observations(rows, keep: Sequence[str] = ()) -> pd.DataFrame:
    """An observation frame with every :data:`OBS_COLUMNS` column, ids and row numbers filled."""
    frame = _frame(rows, OBS_COLUMNS, "obs_id", keep)
    if frame.empty:
        return frame.astype({c: float for c in _FLOAT_OBS})
    missing = frame["file_path"].isna()
    frame.loc[missing, "file_path"] = "memory/" + frame.loc[missing, "source_id"].astype(str) + ".csv"
    if frame["row_number"].isna().any():
        frame["row_number"] = frame.groupby("file_path").cumcount() + 1
    unit = frame["quantity"].map(SI_UNIT)
    frame["value_unit"] = frame["value_unit"].where(frame["value_unit"].notna(), unit)
    frame = frame.astype({c: float for c in _FLOAT_OBS})
    frame["is_outlier"] = frame["is_outlier"].fillna(False).astype(bool)
    frame["obs_id"] = frame["obs_id"].astype("int64")
    frame["row_number"] = frame["row_number"].astype("int64")
    return frame.astype({c: object for c in _TEXT_OBS})


def sample_series(curve, T: Sequence[float], *, boundary: str, quantity: str = "pressure",
                  solid_phase: str = "", source_id: str = "memory", source_kind: str = "literature",
                  file_path: str | None = None, u_rel: float | None = None,
                  u_T_K: float | None = None, value_unit: str | None = None,
                  scale: float = 1.0, first_obs_id: int = 1) -> pd.DataFrame:
    """Observations sampled from ``curve`` (a Curve or any callable T -> value) at ``T``.

    ``scale`` multiplies the values (to plant unit mix-ups); ``u_rel`` is a relative standard
    uncertainty of the value.
    """
    T = np.asarray(T, dtype=float)
    f = curve.value if hasattr(curve, "value") else curve
    values = np.asarray(f(T), dtype=float) * scale
    n = len(T)
    return pd.DataFrame({
        "obs_id": np.arange(first_obs_id, first_obs_id + n), "boundary": boundary,
        "solid_phase": solid_phase, "quantity": quantity, "T_K": T,
        "u_T_K": math.nan if u_T_K is None else u_T_K, "value_si": values,
        "u_value_si": np.abs(values) * u_rel if u_rel is not None else math.nan,
        "source_id": source_id, "source_kind": source_kind,
        "file_path": file_path or f"memory/{source_id}.csv", "row_number": np.arange(1, n + 1),
        "value_unit": value_unit or SI_UNIT[quantity],
    })
