"""Compiling a hot loop with numba, once per machine.

Kernels are compiled on first use (``import obsprep`` does not import numba, which takes a few
tenths of a second) and cached on disk by numba: beside the module when the package directory
is writable, else in the user's cache directory (``$XDG_CACHE_HOME/numba`` or
``~/.cache/numba``), ``NUMBA_CACHE_DIR`` first when set.  With no writable directory at all a
kernel is compiled anew in each process, with one warning saying so.
"""

from __future__ import annotations

import warnings


def compile_cached(function, what: str, *, cache: bool = True, **options):
    """``function`` compiled by ``numba.njit(**options)`` with numba's on-disk cache.

    Returns ``(kernel, cached)``: ``cached`` is False when no cache directory is writable (one
    RuntimeWarning naming ``what``) or ``cache`` was False (a caller that was already warned).
    """
    import numba  # here, not at module level: numba takes a few tenths of a second to import

    if not cache:
        return numba.njit(cache=False, **options)(function), False
    try:
        return numba.njit(cache=True, **options)(function), True
    except RuntimeError as exc:
        if "no locator available" not in str(exc):
            raise
        warnings.warn(f"{what}: no writable cache directory for numba (package directory "
                      f"read-only, user cache directory not writable; set NUMBA_CACHE_DIR to a "
                      f"writable directory): compiled anew in each process", RuntimeWarning,
                      stacklevel=3)
        return numba.njit(cache=False, **options)(function), False
