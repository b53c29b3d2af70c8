"""Numbers behind 2-D views: a log-density grid through a point, and sensible axis limits.

Pure numpy. The drawing layer (``phaseglass.draw``) turns these into artists;
the widgets call them to recompute what the artists show.
"""

import numbers

import numpy as np

from ._validate import check_int

__all__ = ["resolve_coord", "resolve_coords", "log_density_grid", "choose_limits"]


def resolve_coord(coord, names=None, dim=None, *, argument="coord"):
    """Turn one coordinate given by index or by name into an int (the one lookup of phaseglass).

    Parameters
    ----------
    coord : int or str
        An index (negative counts from the end) or a name from ``names``.
    names : sequence of str, optional
    dim : int, optional
        Number of coordinates; defaults to ``len(names)``.
    argument : str
        The argument named in error messages.

    Examples
    --------
    >>> resolve_coord("c", names=("a", "b", "c")), resolve_coord(-1, dim=3)
    (2, 2)
    """
    if dim is None:
        dim = None if names is None else len(names)
    if isinstance(coord, str):
        if names is None or coord not in names:
            known = "no names are known" if names is None else f"known names: {', '.join(names)}"
            raise ValueError(f"`{argument}` names an unknown coordinate {coord!r} ({known})")
        return list(names).index(coord)
    if isinstance(coord, numbers.Integral) and not isinstance(coord, bool):
        i = int(coord)
        if dim is not None:
            if not -dim <= i < dim:
                raise ValueError(f"`{argument}` index {i} is out of range for {dim} coordinates")
            i %= dim
        return i
    raise TypeError(f"`{argument}` entries must be int or str, got {type(coord).__name__} {coord!r}")


def resolve_coords(coords, names=None, dim=None):
    """Turn a pair of coordinates given by index or by name into a tuple of two ints.

    Parameters
    ----------
    coords : pair of int or str
        Indices (negative counts from the end) or names from ``names``.
    names : sequence of str, optional
        Coordinate names (``target.names`` or ``run.names``); needed for names.
    dim : int, optional
        Number of coordinates; defaults to ``len(names)``.

    Returns
    -------
    tuple of int
        Two distinct indices in ``range(dim)``.

    Examples
    --------
    >>> resolve_coords(("b", 0), names=("a", "b", "c"))
    (1, 0)
    """
    if isinstance(coords, (str, numbers.Integral)) or np.ndim(coords) != 1 or len(coords) != 2:
        raise ValueError(f"`coords` must be a pair of indices or names, got {coords!r}")
    out = [resolve_coord(c, names, dim, argument="coords") for c in coords]
    if out[0] == out[1]:
        raise ValueError(f"`coords` must name two different coordinates, got {coords!r}")
    return tuple(out)


def _check_limits(name, lim):
    lo, hi = (float(v) for v in lim)
    if not (np.isfinite(lo) and np.isfinite(hi) and lo < hi):
        raise ValueError(f"`{name}` must be finite (low, high) with low < high, got {lim!r}")
    return lo, hi


def log_density_grid(target, coords, through=None, xlim=(-3.0, 3.0), ylim=(-3.0, 3.0), n=80, *,
                     errors=None):
    """Evaluate the log-density on a grid over two coordinates, holding the others fixed.

    Works on the sampler's (unconstrained) scale, where trajectories live, with
    one vectorised ``target.log_density`` call. The evaluations are not counted
    as sampling work (``target.n_density`` is restored).

    Parameters
    ----------
    target : Target
    coords : pair of int or str
        The two coordinates spanning the slice, by index or by name.
    through : array_like, shape (dim,), optional
        Point (sampler's scale) the slice passes through; its values fix the
        other coordinates. Required when ``dim > 2``.
    xlim, ylim : (float, float)
        Ranges of the first and second coordinate.
    n : int >= 2
        Grid points per axis.
    errors : list, optional
        Where the user's log-density raises at some grid points (``math.log`` of a
        negative number, a solver that fails): without ``errors`` the exception
        propagates; with a list, the grid is evaluated point by point, those
        points are NaN, and ``(n_failed, first_exception)`` is appended to it
        (when it raises everywhere, the first exception propagates).

    Returns
    -------
    X, Y, Z : ndarray, shape (n, n)
        ``X[i, j] = x_j``, ``Y[i, j] = y_i`` (``numpy.meshgrid`` order) and the
        log-density there; non-finite values are kept as they come (NaN or -inf).

    Examples
    --------
    >>> import phaseglass as pg
    >>> X, Y, Z = log_density_grid(pg.demos.correlated_gaussian(), (0, 1), n=5)
    >>> Z.shape
    (5, 5)
    """
    from .target import Target

    if not isinstance(target, Target):
        raise TypeError(f"`target` must be a phaseglass Target, got {type(target).__name__}")
    i, j = resolve_coords(coords, target.names, target.dim)
    n = check_int("n", n, minimum=2)
    xlim = _check_limits("xlim", xlim)
    ylim = _check_limits("ylim", ylim)
    if through is None:
        if target.dim > 2:
            raise ValueError(
                f"`through` is required for a {target.dim}-D target: give the point (dim,) "
                "the slice passes through"
            )
        through = np.zeros(target.dim)
    through = np.asarray(through, dtype=float)
    if through.shape != (target.dim,):
        raise ValueError(f"`through` must have shape ({target.dim},), got {through.shape}")
    x = np.linspace(*xlim, n)
    y = np.linspace(*ylim, n)
    X, Y = np.meshgrid(x, y)
    pts = np.broadcast_to(through, (n * n, target.dim)).copy()
    pts[:, i] = X.ravel()
    pts[:, j] = Y.ravel()
    counts = (target.n_density, target.n_grad)
    try:
        with np.errstate(all="ignore"):
            try:
                Z = np.asarray(target.log_density(pts), dtype=float).reshape(n, n)
            except Exception:
                if errors is None:
                    raise
                Z, failed, first = _pointwise(target, pts)
                if failed == len(pts):
                    raise first  # nowhere evaluable: an error, not a partial picture
                Z = Z.reshape(n, n)
                errors.append((failed, first))
    finally:
        target.n_density, target.n_grad = counts  # a view is not sampling work
    return X, Y, Z


def _pointwise(target, pts):
    """Log-density row by row; rows where the user's code raises are NaN."""
    out = np.full(len(pts), np.nan)
    failed, first = 0, None
    for k, p in enumerate(pts):
        try:
            out[k] = target.log_density(p)
        except Exception as exc:  # user code: count it, keep going
            failed += 1
            first = first or exc
    return out, failed, first


def _points_of(source, dim):
    """Rows (m, dim) of finite points from draws, a Trajectory or an array."""
    positions = getattr(source, "positions", None)
    if positions is not None:  # a Trajectory: leave out the step that diverged and after
        pos = np.asarray(positions, dtype=float)
        step = getattr(source, "divergence_step", None)
        if pos.ndim == 2 and step is not None:
            pos = pos[:int(step)]
        elif pos.ndim == 3 and step is not None:
            steps = np.asarray(step).reshape(-1)
            keep = np.arange(pos.shape[1])[None, :] < np.where(steps >= 0, steps, pos.shape[1])[:, None]
            pos = np.where(keep[..., None], pos, np.nan)
        arr = pos
    else:
        arr = np.asarray(getattr(source, "draws", source), dtype=float)
    if arr.ndim == 0 or (dim is not None and arr.shape[-1] != dim):
        raise ValueError(f"points must have a last axis of length {dim}, got shape {arr.shape}")
    rows = arr.reshape(-1, arr.shape[-1])
    return rows[np.all(np.isfinite(rows), axis=1)]


def choose_limits(*sources, coords=(0, 1), names=None, pad=0.1, quantiles=None, min_width=1e-3):
    """Axis limits that show every given point of two coordinates, with a margin.

    Parameters
    ----------
    *sources : ndarray (..., dim), Trajectory or Run
        Draws (chain, draw, dim), positions, a Trajectory (the step where it
        diverged and later ones are left out, so a blow-up does not swamp the
        view) or a Run (its ``draws``). Non-finite rows are ignored.
    coords : pair of int or str
        Names need ``names``.
    names : sequence of str, optional
    pad : float >= 0
        Margin as a fraction of the span on each side.
    quantiles : (float, float), optional
        Use these quantiles instead of min and max (e.g. ``(0.005, 0.995)`` to
        keep a few far draws from shrinking the bulk).
    min_width : float > 0
        Smallest span. A single point gets a window of width ``max(1, 0.2 |x|)``.

    Returns
    -------
    xlim, ylim : tuple of float

    Examples
    --------
    >>> choose_limits(np.array([[0.0, 0.0], [1.0, 2.0]]), pad=0.0)
    ((0.0, 1.0), (0.0, 2.0))
    """
    if not sources:
        raise ValueError("`choose_limits` needs at least one source of points")
    i, j = resolve_coords(coords, names)
    dims = set()
    rows = []
    for s in sources:
        r = _points_of(s, None)
        dims.add(r.shape[-1])
        rows.append(r)
    if len(dims) > 1:
        raise ValueError(f"all sources must have the same number of coordinates, got {sorted(dims)}")
    pts = np.concatenate(rows, axis=0)
    if pts.shape[0] == 0:
        return (-1.0, 1.0), (-1.0, 1.0)
    out = []
    for c in (i, j):
        v = pts[:, c]
        lo, hi = (np.quantile(v, quantiles) if quantiles is not None else (v.min(), v.max()))
        mid = 0.5 * (lo + hi)
        span = hi - lo
        if span <= 0:  # a single point: a unit window, or 20% of its size when larger
            span = max(0.2 * abs(mid), 1.0)
        span = max(span, min_width)
        lo, hi = mid - 0.5 * span, mid + 0.5 * span
        out.append((float(lo - pad * span), float(hi + pad * span)))
    return out[0], out[1]
