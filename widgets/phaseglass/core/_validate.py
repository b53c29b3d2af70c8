"""Argument checks shared by every constructor and entry point.

Each helper raises with a message that names the argument, says what was
expected and what was received, so the user can fix the call without reading
our source.
"""

import numbers

import numpy as np

__all__ = [
    "check_positive",
    "check_int",
    "check_fraction",
    "check_in",
    "check_callable",
    "as_points",
    "check_finite",
    "user_stacklevel",
    "real_values",
    "MAX_STEPS",
]

#: Largest number of leapfrog steps a trajectory may take. A trajectory keeps
#: every step (for replay and drawing), so 10**5 steps of a 100-dimensional
#: model already hold about 160 MB; longer ones froze notebooks or ran out of memory.
MAX_STEPS = 100_000


def check_positive(name, value, *, allow_zero=False, allow_array=False):
    """Return ``value`` as a float (or float array) after checking it is > 0."""
    if allow_array and np.ndim(value) > 0:
        arr = np.asarray(value, dtype=float)
        bad = ~np.isfinite(arr) | ((arr < 0) if allow_zero else (arr <= 0))
        if np.any(bad):
            op = ">= 0" if allow_zero else "> 0"
            raise ValueError(f"`{name}` must be finite and {op} everywhere, got {arr[bad][:3]}")
        return arr
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"`{name}` must be a real number, got {type(value).__name__} {value!r}")
    value = float(value)
    ok = value >= 0 if allow_zero else value > 0
    if not (ok and np.isfinite(value)):
        op = ">= 0" if allow_zero else "> 0"
        raise ValueError(f"`{name}` must be finite and {op}, got {value!r}")
    return value


def check_int(name, value, *, minimum=None, maximum=None):
    """Return ``value`` as an int after checking its type and bounds."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        if isinstance(value, numbers.Real) and float(value).is_integer():
            value = int(value)
        else:
            raise TypeError(f"`{name}` must be an integer, got {type(value).__name__} {value!r}")
    value = int(value)
    if minimum is not None and value < minimum:
        raise ValueError(f"`{name}` must be >= {minimum}, got {value}")
    if maximum is not None and value > maximum:
        raise ValueError(f"`{name}` must be <= {maximum}, got {value}")
    return value


def check_fraction(name, value, *, closed_right=False):
    """Return ``value`` as a float in [0, 1) (or [0, 1] with ``closed_right``)."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"`{name}` must be a real number, got {type(value).__name__} {value!r}")
    value = float(value)
    ok = 0.0 <= value <= 1.0 if closed_right else 0.0 <= value < 1.0
    if not ok:
        interval = "[0, 1]" if closed_right else "[0, 1)"
        raise ValueError(f"`{name}` must lie in {interval}, got {value!r}")
    return value


def check_in(name, value, choices):
    """Check that ``value`` is one of ``choices``."""
    if value not in choices:
        listed = ", ".join(repr(c) for c in choices)
        raise ValueError(f"`{name}` must be one of {listed}; got {value!r}")
    return value


def check_callable(name, value):
    if not callable(value):
        raise TypeError(f"`{name}` must be callable, got {type(value).__name__} {value!r}")
    return value


def user_stacklevel():
    """``stacklevel`` for ``warnings.warn`` that points at the first caller outside phaseglass."""
    import os
    import sys

    package = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    frame, level = sys._getframe(1), 1
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(package):
        frame, level = frame.f_back, level + 1
    return level


#: Default of a keyword kept one release under its former name (any value, None included,
#: means the caller used the old name).
RENAMED = object()


def warn_renamed(old, new, what="keyword"):
    """DeprecationWarning for a name kept for one release: says what to use instead."""
    import warnings

    warnings.warn(f"the {what} `{old}` is deprecated and will be removed in the next release; "
                  f"use `{new}`", DeprecationWarning, stacklevel=user_stacklevel())


def check_finite(name, x):
    """Raise a ValueError naming ``name`` unless every entry of ``x`` is finite."""
    arr = np.asarray(x, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"`{name}` must be finite, got {arr.tolist() if arr.size <= 8 else arr}")
    return arr


def real_values(name, value):
    """``value`` as a float array, refusing what would be silently mangled.

    ``np.asarray(v, dtype=float)`` drops the imaginary part of a complex number
    (with only a ComplexWarning) and parses strings such as ``"-1.5"``; a user's
    function that returns either has a bug we should name, not hide.
    """
    arr = np.asarray(value)
    kind = arr.dtype.kind
    if kind in "fiu":
        return arr.astype(float, copy=False)
    if kind == "c":
        raise TypeError(f"`{name}` must return real numbers, got complex values "
                        f"({np.ravel(arr)[:3].tolist()}...); return the real log-density")
    if kind == "O" and not any(e is None for e in arr.flat):  # e.g. mixed number types
        try:
            return arr.astype(float)
        except (TypeError, ValueError):
            pass
    raise TypeError(f"`{name}` must return numbers, got {type(value).__name__} {value!r:.80}")


def as_points(name, x, dim):
    """Return ``x`` as a float array of shape (n, dim) and whether it was a single point.

    Accepts (dim,) or (n, dim); anything else is a ValueError naming ``name``.
    """
    arr = np.asarray(x, dtype=float)
    if arr.ndim == 1 and arr.shape[0] == dim:
        return arr[None, :], True
    if arr.ndim == 2 and arr.shape[1] == dim:
        return arr, False
    raise ValueError(
        f"`{name}` must have shape ({dim},) or (n, {dim}), got shape {arr.shape}"
    )
