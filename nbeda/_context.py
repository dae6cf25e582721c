"""The shared, read-only view of one frame that every section computes from.

A :class:`Context` holds a reference to the user's frame (never mutated: every
section works on copies or on numpy arrays), the options in force and the
resolved roles.  Columns are addressed by *position*, because labels may be
duplicated, non-string or tuples; tables shown to the user are indexed by the
labels themselves (index name ``column``).
"""

from __future__ import annotations

from collections.abc import Hashable, Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

__all__ = ["ROLES", "NUMERIC_ROLES", "Options", "Context"]

#: Every role a column can take, in display order.
ROLES: tuple[str, ...] = (
    "continuous",
    "discrete",
    "nominal",
    "ordinal",
    "datetime",
    "boolean",
    "identifier",
    "text",
    "constant",
    "empty",
)

#: Roles whose values are analysed as numbers (ordinal only when numeric-coded).
NUMERIC_ROLES: frozenset[str] = frozenset({"continuous", "discrete", "ordinal"})


@dataclass(frozen=True)
class Options:
    """Options in force for one report (they appear in every emitted code header)."""

    roles: Mapping[Any, str] = field(default_factory=dict)
    by: Hashable | None = None
    target: Hashable | None = None
    sample: int | None = None
    confidence: float = 0.95
    seed: int = 0

    def __post_init__(self) -> None:
        if not 0.5 <= float(self.confidence) < 1.0:
            raise ValueError(f"confidence must be in [0.5, 1), got {self.confidence!r}")
        if self.sample is not None and int(self.sample) < 1:
            raise ValueError(f"sample must be a positive row count, got {self.sample!r}")
        bad = {k: v for k, v in dict(self.roles).items() if v not in ROLES}
        if bad:
            k, v = next(iter(bad.items()))
            raise ValueError(f"unknown role {v!r} for column {k!r}; roles are: {', '.join(ROLES)}")


def _find_label(columns: pd.Index, label: Any) -> list[int]:
    """Positions of ``label`` in ``columns`` (handles duplicates and tuples)."""
    return [i for i, c in enumerate(columns) if _same_label(c, label)]


def _same_label(a: Any, b: Any) -> bool:
    try:
        return bool(a == b) and type(a) is not bool  # noqa: E721 - keep bools distinct from 0/1
    except Exception:  # labels that refuse comparison (arrays, odd objects)
        return False


class Context:
    """One frame, its options and its roles, shared by every section of a report."""

    def __init__(self, frame: pd.DataFrame, options: Options | None = None) -> None:
        if not isinstance(frame, pd.DataFrame):
            raise TypeError(f"expected a pandas DataFrame, got {type(frame).__name__}")
        self.user_frame = frame
        self.options = options or Options()
        #: positions of columns cast to ordered Categoricals because the user called them ordinal
        self.ordinal_casts: dict[int, list[Any]] = ordinal_casts(frame, self.options.roles)
        if self.ordinal_casts:  # a shallow copy: the user's frame is never touched
            frame = frame.copy(deep=False)
            for i, levels in self.ordinal_casts.items():
                frame.isetitem(i, pd.Categorical(frame.iloc[:, i], categories=levels, ordered=True))
        self.frame = frame
        self.labels: list[Any] = list(frame.columns)
        self.unique_labels: bool = bool(frame.columns.is_unique) and not isinstance(
            frame.columns, pd.MultiIndex
        )
        self._roles: pd.DataFrame | None = None
        self._float_cache: dict[int, np.ndarray] = {}
        # Validate options that name columns early, with clear messages.
        for key in ("by", "target"):
            val = getattr(self.options, key)
            if val is not None and not self.positions_of(val):
                raise KeyError(f"--{key}: no column named {val!r}")
        for col in self.options.roles:
            if not self.positions_of(col):
                raise KeyError(f"roles: no column named {col!r}")

    # ------------------------------------------------------------------ columns
    @property
    def n_rows(self) -> int:
        return int(self.frame.shape[0])

    @property
    def n_cols(self) -> int:
        return int(self.frame.shape[1])

    def positions_of(self, label: Any) -> list[int]:
        """Positions of a column label (several when labels are duplicated)."""
        return _find_label(self.frame.columns, label)

    def position(self, label: Any) -> int:
        pos = self.positions_of(label)
        if not pos:
            raise KeyError(f"no column named {label!r}")
        return pos[0]

    def series(self, i: int) -> pd.Series:
        """Column at position ``i`` (a view under copy-on-write; never modify it)."""
        return self.frame.iloc[:, i]

    def index_for(self, positions: Iterable[int]) -> pd.Index:
        """The ``column``-named index of labels for a per-column table."""
        return pd.Index(
            [self.labels[i] for i in positions], name="column", tupleize_cols=False, dtype=object
        )

    # -------------------------------------------------------------------- roles
    @property
    def roles_table(self) -> pd.DataFrame:
        if self._roles is None:
            from nbeda.stats.roles import compute_roles

            self._roles = compute_roles(self.user_frame, self.options.roles)  # the frame as given
        return self._roles

    @property
    def roles(self) -> list[str]:
        """Role of each column, by position."""
        return list(self.roles_table["role"])

    def with_role(self, *roles: str) -> list[int]:
        """Positions of the columns whose role is one of ``roles``."""
        wanted = set(roles)
        return [i for i, r in enumerate(self.roles) if r in wanted]

    def is_numeric_coded(self, i: int) -> bool:
        """True when column ``i`` holds numbers (or durations) we can analyse as floats."""
        s = self.series(i)
        dt = s.dtype
        if pd.api.types.is_bool_dtype(dt):
            return False
        if isinstance(dt, pd.CategoricalDtype):
            return pd.api.types.is_numeric_dtype(dt.categories.dtype) and not pd.api.types.is_bool_dtype(
                dt.categories.dtype
            )
        return pd.api.types.is_numeric_dtype(dt) or pd.api.types.is_timedelta64_dtype(dt)

    def numeric_positions(self) -> list[int]:
        """Columns analysed as numbers: continuous, discrete and numeric-coded ordinal."""
        return [i for i in self.with_role(*NUMERIC_ROLES) if self.is_numeric_coded(i)]

    def float_values(self, i: int) -> np.ndarray:
        """Column ``i`` as float64 (NaN for missing; durations in seconds). Cached, read-only."""
        cached = self._float_cache.get(i)
        if cached is None:
            cached = to_float(self.series(i))
            cached.setflags(write=False)
            self._float_cache[i] = cached
        return cached

    def float_frame(self, positions: list[int]) -> np.ndarray:
        """A 2-D float64 array (rows × columns) of the given numeric columns."""
        if not positions:
            return np.empty((self.n_rows, 0))
        return np.column_stack([self.float_values(i) for i in positions])


def ordinal_casts(frame: pd.DataFrame, overrides: Mapping[Any, str]) -> dict[int, list[Any]]:
    """Columns the user declared ordinal that carry no order yet, with their levels in sorted order.

    Numeric columns keep their numbers (their order is the numbers'); ordered
    Categoricals keep their own order.  Other columns (strings, booleans, unordered
    categoricals) become ordered Categoricals whose levels are sorted (first-seen
    order when the values do not sort).  Levels must be plain scalars so the
    emitted code can write them as literals.
    """
    out: dict[int, list[Any]] = {}
    for label, role in overrides.items():
        if role != "ordinal":
            continue
        for i in _find_label(frame.columns, label):
            s = frame.iloc[:, i]
            dt = s.dtype
            if isinstance(dt, pd.CategoricalDtype) and dt.ordered:
                continue
            if pd.api.types.is_numeric_dtype(dt) and not pd.api.types.is_bool_dtype(dt):
                continue
            try:
                values = list(pd.unique(s.dropna()))
            except TypeError:
                continue  # unhashable values cannot be levels
            plain = [v.item() if isinstance(v, np.generic) else v for v in values]
            if not all(isinstance(v, (str, int, float, bool)) for v in plain):
                continue
            try:
                plain = sorted(plain)
            except TypeError:
                pass
            out[i] = plain
    return out


def to_float(s: pd.Series) -> np.ndarray:
    """Plain float64 values of a numeric-coded series (same rule as the emitted code)."""
    dt = s.dtype
    if pd.api.types.is_timedelta64_dtype(dt):
        return s.dt.total_seconds().to_numpy(dtype="float64", na_value=np.nan)
    return s.astype("float64").to_numpy(dtype="float64", na_value=np.nan)
