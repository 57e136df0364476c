"""Errors and warnings raised by isoturnover.

All errors derive from :class:`IsoturnoverError`; all warnings from
:class:`IsoturnoverWarning` (a :class:`UserWarning`), so a notebook can silence or
escalate the whole family at once::

    import warnings, isoturnover as iso
    warnings.simplefilter("error", iso.IsoturnoverWarning)
"""

from __future__ import annotations

__all__ = [
    "IsoturnoverError",
    "DataError",
    "FitError",
    "UnknownIsotopeError",
    "ScaleError",
    "IsoturnoverWarning",
    "DataWarning",
    "ConvergenceWarning",
    "BoundWarning",
    "IdentifiabilityWarning",
    "DesignWarning",
    "GoodnessOfFitWarning",
]


class IsoturnoverError(Exception):
    """Base class of every error raised by isoturnover."""


class DataError(IsoturnoverError, ValueError):
    """Input data that cannot be used: names the file, row, column and value where it can."""


class FitError(IsoturnoverError, RuntimeError):
    """A fit that could not be carried out at all (not merely an untrustworthy one)."""


class UnknownIsotopeError(IsoturnoverError, ValueError):
    """An isotope code that the library does not know."""


class ScaleError(IsoturnoverError, ValueError):
    """A conversion that cannot be done exactly on the requested scale."""


class IsoturnoverWarning(UserWarning):
    """Base class of every warning issued by isoturnover."""


class DataWarning(IsoturnoverWarning):
    """Something in the data the user should look at (duplicates, dropped rows on request)."""


class ConvergenceWarning(IsoturnoverWarning):
    """The optimizer did not report convergence."""


class BoundWarning(IsoturnoverWarning):
    """A parameter sits at a bound of its allowed range."""


class IdentifiabilityWarning(IsoturnoverWarning):
    """The data cannot separate two parameters (pools too close, tiny pool, correlation ~1)."""


class DesignWarning(IsoturnoverWarning):
    """The sampling design limits what the fit can say (too few points, plateau not reached)."""


class GoodnessOfFitWarning(IsoturnoverWarning):
    """The residual scatter is far larger than the stated analytic sd."""
