"""``scipy.stats`` imported on first use.

Importing :mod:`scipy.stats` costs about 0.4 s (its distributions are built at import),
more than the rest of the package's imports together, and most runs need it for a handful
of quantiles only, long after import — or, in a worker process that fits series, never.
Modules write ``from .lazystats import stats`` and call ``stats.t.ppf(...)`` as usual: the
first attribute read imports :mod:`scipy.stats` (once; later reads find it in
``sys.modules``). Hot paths use the cheaper :mod:`scipy.special` functions directly
(``fdtrc``, ``chdtrc``, ``stdtrit``, ``ndtri``).
"""

from __future__ import annotations

import importlib

__all__ = ["stats"]


class _LazyStats:
    """Stands for :mod:`scipy.stats`; imports it when an attribute is first read."""

    __slots__ = ()

    def __getattr__(self, name):
        """Give ``scipy.stats.<name>``, importing :mod:`scipy.stats` on the first call.

        Parameters
        ----------
        name : str
            An attribute of :mod:`scipy.stats` (``"t"``, ``"norm"``, ``"chi2"`` …).

        Returns
        -------
        object
            ``getattr(scipy.stats, name)``.
        """
        return getattr(importlib.import_module("scipy.stats"), name)

    def __repr__(self):
        return "<scipy.stats, imported on first use>"


#: :mod:`scipy.stats` on first use (see the module docstring).
stats = _LazyStats()
