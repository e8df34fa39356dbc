"""Shared plumbing of the data-driven tests: reading a table, column kinds, rows of a test.

Not a public module: the kernel, G², mixed and automatic tests use it so that they read their
input, judge column kinds and report bad input in one way.
"""

from __future__ import annotations

import hashlib
from numbers import Integral, Real

import numpy as np
import pandas as pd

from ..exceptions import DataValidationError, SettingsError

__all__ = ["DISCRETE_KINDS", "as_frame", "fingerprint", "kinds_of", "check_missing_policy",
           "check_single_levels", "check_int", "check_real", "check_choice", "check_seed",
           "reject_unknown", "numeric_values"]

#: Kinds read as discrete (levels rather than a scale) by the tests.
DISCRETE_KINDS = ("binary", "categorical", "ordinal")


def as_frame(data, variables=None, *, owner: str) -> pd.DataFrame:
    """A DataFrame with string column names from a DataFrame or a 2-D array."""
    if isinstance(data, pd.DataFrame):
        frame = data.copy()
        frame.columns = [str(c) for c in frame.columns]
    else:
        values = np.asarray(data)
        if values.ndim != 2:
            raise DataValidationError(f"{owner} needs a 2-D table: one column per variable "
                                      f"(got an array of shape {values.shape})")
        if variables is None:
            variables = [f"x{i}" for i in range(values.shape[1])]
        if len(variables) != values.shape[1]:
            raise DataValidationError(f"{owner}: {len(variables)} names for "
                                      f"{values.shape[1]} columns; give one name per column")
        frame = pd.DataFrame(values, columns=[str(v) for v in variables])
    names = list(frame.columns)
    dup = [n for n in dict.fromkeys(names) if names.count(n) > 1]
    if dup:
        raise DataValidationError(f"{owner}: column name {dup[0]!r} appears more than once; "
                                  f"rename the copies")
    if frame.shape[1] < 2:
        raise DataValidationError(f"{owner} needs at least 2 columns; got {frame.shape[1]}")
    return frame.reset_index(drop=True)


def fingerprint(frame: pd.DataFrame) -> str:
    """A short SHA-256 of the table's values and column names (keys the p-value cache)."""
    digest = hashlib.sha256()
    digest.update("\x1f".join(frame.columns).encode("utf-8"))
    digest.update(pd.util.hash_pandas_object(frame, index=False).to_numpy().tobytes())
    return digest.hexdigest()[:16]


def kinds_of(frame: pd.DataFrame) -> dict[str, str]:
    """The kind of every column, by :func:`discovery.data.column_kind`."""
    from ..data import column_kind
    return {c: column_kind(frame[c]) for c in frame.columns}


def check_missing_policy(missing: str, frame: pd.DataFrame, owner: str) -> bool:
    """Validate ``missing``; return True when the table has missing cells (test-wise mode)."""
    if missing not in ("drop", "test-wise"):
        raise SettingsError(f"The 'missing' parameter of {owner} must be 'drop' or "
                            f"'test-wise'. Got {missing!r} instead.")
    has_nan = bool(frame.isna().to_numpy().any())
    if has_nan and missing == "drop":
        worst = frame.isna().sum().idxmax()
        raise DataValidationError(f"{owner}: the data has missing values (e.g. in column "
                                  f"{worst!r}); drop incomplete rows first or use "
                                  f"missing='test-wise'")
    return has_nan


def check_single_levels(frame: pd.DataFrame, owner: str) -> None:
    """Raise when a column has fewer than two distinct values: it cannot carry dependence."""
    for column in frame.columns:
        levels = frame[column].nunique(dropna=True)
        if levels < 2:
            what = "no value" if levels == 0 else (
                f"a single level ({frame[column].dropna().iloc[0]!r})")
            raise DataValidationError(f"{owner}: column {column!r} has {what}; it cannot be "
                                      f"tested for dependence — leave it out of the search")


def check_int(value, name: str, owner: str, *, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, Integral) or value < minimum:
        raise SettingsError(f"The {name!r} option of {owner} must be an int >= {minimum}. "
                            f"Got {value!r} instead.")
    return int(value)


def check_real(value, name: str, owner: str, *, low: float, high: float | None = None,
               low_closed: bool = False) -> float:
    ok = isinstance(value, Real) and not isinstance(value, bool) and np.isfinite(value)
    if ok:
        ok = value >= low if low_closed else value > low
    if ok and high is not None:
        ok = value < high
    if not ok:
        bracket = "[" if low_closed else "("
        top = "inf)" if high is None else f"{high:g})"
        raise SettingsError(f"The {name!r} option of {owner} must be a number in "
                            f"{bracket}{low:g}, {top}. Got {value!r} instead.")
    return float(value)


def check_choice(value, name: str, owner: str, options) -> str:
    if value not in options:
        raise SettingsError(f"The {name!r} option of {owner} must be one of "
                            f"{', '.join(repr(o) for o in options)}. Got {value!r} instead.")
    return value


def check_seed(value, owner: str) -> int:
    if isinstance(value, bool) or not isinstance(value, Integral) or value < 0:
        raise SettingsError(f"The 'seed' option of {owner} must be a non-negative int. "
                            f"Got {value!r} instead.")
    return int(value)


def reject_unknown(options: dict, owner: str, known) -> None:
    """One clear line for an option the test does not take."""
    unknown = sorted(set(options) - set(known))
    if unknown:
        raise SettingsError(f"{owner} does not take the option(s) {unknown}; it takes "
                            f"{sorted(known) if known else 'no options'}")


def numeric_values(frame: pd.DataFrame, owner: str, *, hint: str) -> np.ndarray:
    """The table as floats; a column holding text or categories raises one clear line."""
    out = np.empty(frame.shape, dtype=float)
    for j, column in enumerate(frame.columns):
        series = frame[column]
        if pd.api.types.is_bool_dtype(series.dtype):
            out[:, j] = series.astype(float).to_numpy()
            continue
        if isinstance(series.dtype, pd.CategoricalDtype) or not (
                pd.api.types.is_numeric_dtype(series.dtype)
                or pd.api.types.infer_dtype(series, skipna=True) in (
                    "integer", "floating", "mixed-integer-float", "decimal", "empty")):
            shown = ", ".join(repr(v) for v in series.dropna().unique()[:2])
            raise DataValidationError(f"{owner}: column {column!r} is not numeric ({shown}"
                                      f"{', ...' if series.nunique() > 2 else ''}); {hint}")
        out[:, j] = pd.to_numeric(series).to_numpy(dtype=float)
    if np.isinf(out).any():
        column = frame.columns[int(np.isinf(out).any(axis=0).argmax())]
        raise DataValidationError(f"{owner}: column {column!r} holds infinite values; replace "
                                  f"them with numbers or mark them missing")
    return out


def one_at_a_time(one, triples) -> tuple[np.ndarray, np.ndarray]:
    """Statistics and p-values of a batch answered by ``one(x, y, S)`` test by test (tests
    whose work per triple cannot be stacked, such as stratified tables or regressions)."""
    stat = np.full(len(triples), np.nan)
    pval = np.full(len(triples), np.nan)
    for i, (x, y, s) in enumerate(triples):
        stat[i], pval[i] = one(x, y, tuple(s))
    return stat, pval
