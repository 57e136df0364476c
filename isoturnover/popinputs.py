"""Checks and coding of the inputs of a random-effects analysis (used by
:mod:`isoturnover.randomeffects` and :mod:`isoturnover.popestimate`): vectors of estimates
and standard errors named by index or animal, and moderators coded as a design matrix
(numeric columns as they are, others dummy coded against their first level, an intercept).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import DataError

__all__ = ["arg_label", "check_vector", "estimate_names", "Moderator", "moderator_frame",
           "is_categorical", "encode_moderators", "design_matrix", "same_values"]


# --------------------------------------------------------------------------- input checks

def arg_label(names, i) -> str:
    """Position and, when it differs, the animal's name, for messages."""
    if names is None:
        return f"index {i}"
    return f"index {i} ({names[i]!r})"


def check_vector(name, values, *, k=None, names=None, positive=False, allow_nonfinite=False):
    """A checked 1-D float copy of ``values``; errors name the argument and the index."""
    if isinstance(values, (str, bytes, Mapping)) or np.ndim(values) != 1:
        raise DataError(f"'{name}' must be a one-dimensional sequence of numbers; got "
                        f"{type(values).__name__}"
                        + (f" with {np.ndim(values)} dimensions" if np.ndim(values) else ""))
    seq = list(values.values) if isinstance(values, pd.Series) else list(values)
    out = np.empty(len(seq))
    for i, v in enumerate(seq):
        number = not isinstance(v, (bool, np.bool_, str, bytes))
        if number:
            try:
                out[i] = float(v) if v is not None else np.nan
            except (TypeError, ValueError):
                number = False
        if not number:
            raise DataError(f"'{name}' at {arg_label(names, i)} must be a number; got {v!r}")
    if k is not None and out.size != k:
        raise DataError(f"'{name}' has {out.size} values; 'estimates' has {k} (one per "
                        "animal)")
    if not allow_nonfinite:
        bad = np.flatnonzero(~np.isfinite(out))
        if bad.size:
            i = int(bad[0])
            raise DataError(f"'{name}' at {arg_label(names, i)} is {out[i]}; a finite number is "
                            "needed")
    if positive:
        bad = np.flatnonzero(out <= 0)
        if bad.size:
            i = int(bad[0])
            raise DataError(f"'{name}' at {arg_label(names, i)} is {out[i]}; a standard error "
                            "must be > 0")
    return out


def estimate_names(names, estimates, k):
    """Animal names: given, the index of a Series, or 0 … k−1."""
    if names is None:
        if isinstance(estimates, pd.Series):
            return tuple(estimates.index)
        return tuple(range(k))
    if isinstance(names, (str, bytes, Mapping)) or not hasattr(names, "__len__") \
            or len(names) != k:
        raise DataError(f"'names' must give one name per animal ({k}); got {names!r}")
    return tuple(names)


@dataclass(frozen=True)
class Moderator:
    """How one moderator column becomes design columns."""

    column: object
    categorical: bool
    levels: tuple  # all levels, the first the reference (categorical only)


def moderator_frame(name, moderators):
    if isinstance(moderators, pd.Series):
        return moderators.to_frame()
    if isinstance(moderators, Mapping):
        return pd.DataFrame(dict(moderators))
    if isinstance(moderators, pd.DataFrame):
        return moderators
    raise DataError(f"'{name}' must be a DataFrame of covariates (one row per animal); got "
                    f"{type(moderators).__name__}")


def is_categorical(s: pd.Series) -> bool:
    return pd.api.types.is_bool_dtype(s) or not pd.api.types.is_numeric_dtype(s)


def encode_moderators(moderators, k):
    """Design matrix (intercept first) and the coding of ``moderators``."""
    frame = moderator_frame("moderators", moderators)
    if len(frame) != k:
        raise DataError(f"'moderators' has {len(frame)} rows; there are {k} animals (one row "
                        "each, in the same order)")
    if frame.shape[1] == 0:
        raise DataError("'moderators' has no columns")
    coding = []
    for col in frame.columns:
        s = frame[col]
        miss = np.flatnonzero(pd.isna(s).to_numpy())
        if miss.size:
            i = int(miss[0])
            raise DataError(f"'moderators' column {col!r}, row {i} (index {frame.index[i]!r}) "
                            "is missing; every animal needs every covariate")
        if is_categorical(s):
            if isinstance(s.dtype, pd.CategoricalDtype):
                levels = tuple(c for c in s.cat.categories if (s == c).any())
            else:
                levels = tuple(sorted(pd.unique(s), key=lambda v: (str(type(v)), str(v))))
            if len(levels) < 2:
                raise DataError(f"'moderators' column {col!r} has one value ({levels[0]!r}) "
                                "for every animal; a moderator must vary")
            coding.append(Moderator(col, True, levels))
        else:
            vals = s.to_numpy(dtype=float)
            bad = np.flatnonzero(~np.isfinite(vals))
            if bad.size:
                i = int(bad[0])
                raise DataError(f"'moderators' column {col!r}, row {i} (index "
                                f"{frame.index[i]!r}) is {vals[i]}; a finite number is needed")
            coding.append(Moderator(col, False, ()))
    coding = tuple(coding)
    X, terms = design_matrix(frame, coding, "moderators")
    p = X.shape[1]
    if k - p < 1:
        raise DataError(f"'moderators' give {p} coefficients (with the intercept) for {k} "
                        "animals; a meta-regression needs more animals than coefficients")
    if np.linalg.matrix_rank(X) < p:
        raise DataError(f"'moderators' are collinear (the design of terms {terms} has rank "
                        f"{np.linalg.matrix_rank(X)} < {p}); drop a redundant column")
    return X, terms, coding


def design_matrix(frame, coding, name):
    """Design matrix of ``frame`` under ``coding``: intercept, numbers, treatment dummies."""
    cols, terms = [np.ones(len(frame))], ["intercept"]
    for m in coding:
        if m.column not in frame.columns:
            raise DataError(f"'{name}' has no column {m.column!r} (the fit used "
                            f"{[c.column for c in coding]})")
        s = frame[m.column]
        if m.categorical:
            vals = s.to_numpy(dtype=object)
            for i, v in enumerate(vals):
                if not any(same_values(v, lev) for lev in m.levels):
                    raise DataError(f"'{name}' column {m.column!r}, row {i} is {v!r}; the fit "
                                    f"knows the levels {list(m.levels)}")
            for lev in m.levels[1:]:
                cols.append(np.array([1.0 if same_values(v, lev) else 0.0 for v in vals]))
                terms.append(f"{m.column}[{lev}]")
        else:
            try:
                vals = s.to_numpy(dtype=float)
            except (TypeError, ValueError):
                raise DataError(f"'{name}' column {m.column!r} must be numeric, as in the "
                                "fit") from None
            bad = np.flatnonzero(~np.isfinite(vals))
            if bad.size:
                raise DataError(f"'{name}' column {m.column!r}, row {int(bad[0])} is "
                                f"{vals[bad[0]]}; a finite number is needed")
            cols.append(vals)
            terms.append(str(m.column))
    return np.column_stack(cols), tuple(terms)


def same_values(a, b) -> bool:
    """Whether a covariate value equals a level (False when they cannot be compared)."""
    try:
        return bool(a == b)
    except (TypeError, ValueError):
        return False
