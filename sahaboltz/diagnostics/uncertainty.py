"""n_e uncertainties as a log-normal quantity: one place for their names.

n_e comes out of the diagnostics as ln n_e with a Gaussian error sigma(ln n_e), so n_e itself
is log-normal: its 1-sigma interval is [n_e e^-sigma, n_e e^+sigma], asymmetric (an error of
3.3e16 quoted on n_e = 1.6e16 would reach below zero).  The names say which logarithm:
``ln_ne_error`` is sigma(ln n_e), ``log10_ne_error`` is sigma(log10 n_e) = sigma(ln n_e) / ln 10.
"""

from __future__ import annotations

import warnings

import numpy as np

LN10 = float(np.log(10.0))


def bounds(n_e, ln_error):
    """The 1-sigma interval (n_e e^-sigma, n_e e^+sigma) of a log-normal n_e."""
    n_e, s = np.asarray(n_e, dtype=float), np.asarray(ln_error, dtype=float)
    return n_e * np.exp(-s), n_e * np.exp(s)


def summary_items(n_e, ln_error) -> dict:
    """The n_e entries of a result summary (CLI and Python share these names)."""
    lo, hi = bounds(n_e, ln_error)
    return {"n_e_cm-3": float(n_e), "n_e_low_cm-3": float(lo), "n_e_high_cm-3": float(hi),
            "sigma_ln_n_e": float(ln_error), "sigma_log10_n_e": float(ln_error) / LN10}


class LogNormalDensity:
    """Properties of a result with ``electron_density`` and ``ln_ne_error`` (sigma(ln n_e))."""

    @property
    def log10_ne_error(self):
        """sigma(log10 n_e) = sigma(ln n_e) / ln 10."""
        return np.asarray(self.ln_ne_error) / LN10

    @property
    def electron_density_bounds(self):
        """(low, high): the 1-sigma interval n_e e^-+sigma(ln n_e) [cm^-3]."""
        return bounds(self.electron_density, self.ln_ne_error)

    @property
    def log_ne_error(self):
        """Deprecated name of :attr:`ln_ne_error` (sigma of the natural log of n_e)."""
        warnings.warn("log_ne_error is sigma(ln n_e) and is now called ln_ne_error "
                      "(log10_ne_error is sigma(log10 n_e))", DeprecationWarning, stacklevel=2)
        return self.ln_ne_error


__all__ = ["bounds", "summary_items", "LogNormalDensity", "LN10"]
