"""Errors and warnings raised by isoturnover.

All errors derive from :class:`IsoturnoverError`; all warnings from
:class:`IsoturnoverWarning` (a :class:`UserWarning`), so a notebook can silence or
escalate the whole family at once::

    import warnings, isoturnover as iso
    warnings.simplefilter("error", iso.IsoturnoverWarning)

The convention: bad data or a bad argument raises :class:`DataError` (a ``ValueError``)
whose message names the argument (and the file, row and column for a table), what is
allowed and what was given; :class:`UnknownIsotopeError` and :class:`ScaleError` are
kinds of it. A fit that cannot be carried out at all raises :class:`FitError`. The
library raises no plain ``ValueError`` or ``TypeError`` of its own: a wrong-typed argument
is a :class:`DataError` that says what type is expected.
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
    """Input data or an argument that cannot be used.

    The message names the argument (and the file, row and column of a table), the allowed
    values and what was given. A ``ValueError``, so ``except ValueError`` also catches it.
    """


class FitError(IsoturnoverError, RuntimeError):
    """A fit that could not be carried out at all (not merely an untrustworthy one)."""


class UnknownIsotopeError(DataError):
    """An isotope code that the library does not know (a :class:`DataError`)."""


class ScaleError(DataError):
    """A conversion that cannot be done exactly on the requested scale (a :class:`DataError`).

    For instance atom fractions of oxygen or sulfur with ``law="refuse"``, or a δ34S beyond
    the turning point of the mass-dependent law.
    """


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
