"""Gibbs sampling by inverse CDF, optionally driven by deterministically shifted uniforms.

Each transition updates coordinates 0, 1, ..., dim-1 in turn (a systematic scan).
Coordinate ``i`` of a chain moves to ``F^-1(u_i | x_-i)``, where ``F`` is the
CDF of its conditional distribution given the other coordinates and ``u_i`` is a
uniform. Where the uniform comes from is the knob a widget turns:

* ``shift=None`` -- ordinary Gibbs sampling: a fresh uniform per update.
* ``shift=c`` -- the uniform of each coordinate is kept in the chain's state and,
  after the update, replaced by ``F(old x_i | x_-i) + c (mod 1)``. The pair
  ``(x_i, u_i) -> (F^-1(u_i), F(x_i))`` is a measure-preserving permutation of
  the extended space (target times uniform), so the scheme leaves the target
  invariant for every ``c``; the shift is what makes it explore.
* ``shift="random"`` -- as above with a fresh ``c`` per transition.
"""

import functools
import numbers
import warnings

import numpy as np

from ._validate import check_int, user_stacklevel
from .frozen import frozen_batch, frozen_values
from .kernels import Kernel, _Knob

__all__ = ["Gibbs"]

#: Default number of grid nodes for numeric conditionals (see ``Gibbs`` Notes).
DEFAULT_GRID_SIZE = 512

_DROP = 25.0                            # nats below the maximum where the support search stops
_BRACKET_POWERS = np.arange(-40.0, 41.0)  # bracketing offsets are scale * 2**j
_BRACKET_STEPS = 2.0 ** _BRACKET_POWERS
_FIRST_POWERS = slice(32, 49)           # j = -8..8, tried first: where nearly every search stops
_SIDES = np.array([0, 1])               # offsets below, above the current value
_EDGE_POINTS = 32                       # points per multisection pass at a truncation edge
_EDGE_PASSES = 6                        # 33**6 ~ 1.3e9: the edge is found to ~8e-10 of its bracket
_COARSE_SHARE = 16                      # the equispaced pass has grid_size // 16 nodes (at least 16)
_REFINE = 4                             # grid_size // 4 evaluated nodes, interpolated to grid_size
_GRADED = 3                             # nodes halving the distance to each end of the grid
_MAX_REGRID = 8                         # re-grids onto the region that holds the mass
_FLAT = 1e-9                            # |log-density step| below which a segment is uniform
_UNIFORM_SHARE = 0.2                    # share of adapted nodes kept evenly spread


# ----------------------------------------------------------------------------- validation
def _check_shift(name, value):
    if value is None:
        return None
    if isinstance(value, str):
        if value == "random":
            return value
        raise ValueError(f"`{name}` must be None, 'random' or a float in [0, 1), got {value!r}")
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(
            f"`{name}` must be None, 'random' or a float in [0, 1), got {type(value).__name__} {value!r}"
        )
    value = float(value)
    if not 0.0 <= value < 1.0:  # also rejects nan
        raise ValueError(f"`{name}` must be None, 'random' or a float in [0, 1), got {value!r}")
    return value


def _check_conditionals(name, value):
    if value is not None and not callable(value):
        raise TypeError(
            f"`{name}` must be None or a callable conditionals(i, x) returning an object with "
            f"cdf and ppf (a frozen scipy.stats distribution works), got {type(value).__name__} {value!r}"
        )
    return value


def _check_grid_size(name, value):
    return check_int(name, value, minimum=16)


def _check_flag(name, value):
    if not isinstance(value, (bool, np.bool_)):
        raise TypeError(f"`{name}` must be True or False, got {type(value).__name__} {value!r}")
    return bool(value)


def _conditional_logpdf(dist, v):
    """Log-density of a user's conditional at ``v``: logpdf, pdf, or a difference of its cdf."""
    if callable(getattr(dist, "logpdf", None)):
        return np.array([float(dist.logpdf(t)) for t in v])
    if callable(getattr(dist, "pdf", None)):
        return np.log([float(dist.pdf(t)) for t in v])
    h = 1e-5 * max(float(np.ptp(v)), 1e-12)
    return np.log([(float(dist.cdf(t + h)) - float(dist.cdf(t - h))) / (2 * h) for t in v])


# --------------------------------------------------------------------- numeric conditionals
def _evaluate(target, position, i, values, *, allow_inf=False):
    """Log-density (sampler scale) of ``position`` rows with coordinate ``i`` set to ``values``.

    ``position`` is (m, dim), ``values`` (m, k); returns (m, k) with nan mapped to -inf.
    One ``target.log_density`` call on an (m * k, dim) batch. +inf raises unless
    ``allow_inf`` (then the caller checks the part it uses with ``_no_inf``).
    """
    m, k = values.shape
    pts = position[:, None, :].repeat(k, axis=1)
    pts[:, :, i] = values
    with np.errstate(all="ignore"):
        lp = np.asarray(target.log_density(pts.reshape(m * k, -1)), dtype=float).reshape(m, k)
    if not np.isfinite(lp).all():  # else nothing to map or refuse
        lp = np.where(np.isnan(lp), -np.inf, lp)
        if not allow_inf:
            _no_inf(target, lp, pts, i)
    return lp


def _no_inf(target, lp, pts, i):
    if (lp == np.inf).any():
        r, c = np.argwhere(lp == np.inf)[0]
        raise ValueError(
            f"`log_density` returned +inf at {target.to_user(pts[r, c])} while building the "
            f"conditional of coordinate {i}: the density is not bounded there. Declare the "
            "coordinate's `bounds` in Target (so it is sampled on an unconstrained scale) or "
            "pass exact `conditionals`."
        )


def _bracket_log_density(target, position, i, z0, offsets):
    """Log-density at ``z0`` and at ``z0 - offsets``, ``z0 + offsets``: (m, 1 + 2 J).

    The offsets j = -8..8 (``_FIRST_POWERS``) are evaluated first, in one batch. A row whose
    search (``_first_stop``) stops inside that window, past its first offset, needs no
    more: its smaller offsets are filled with its log-density at ``z0`` (never a stop) and
    its larger ones with -inf (never reached). Other rows are evaluated at every offset.
    Also returns ``_first_stop`` of each side (``-`` then ``+``) as (m, 2) arrays (index,
    found), for the rows whose log-density at ``z0`` is finite.
    """
    m, J = offsets.shape
    a, b = _FIRST_POWERS.start, _FIRST_POWERS.stop
    values = np.empty((m, 1 + 2 * (b - a)))
    values[:, 0] = z0
    np.subtract(z0[:, None], offsets[:, a:b], out=values[:, 1:1 + b - a])
    np.add(z0[:, None], offsets[:, a:b], out=values[:, 1 + b - a:])
    lpw = _evaluate(target, position, i, values, allow_inf=True)
    lp0 = lpw[:, 0]
    lp = np.empty((m, 1 + 2 * J))
    lp[:, 0] = lp0
    sides = lp[:, 1:].reshape(m, 2, J)  # a view: (row, side, offset)
    sides[:, :, :a] = lp0[:, None, None]
    sides[:, :, a:b] = lpw[:, 1:].reshape(m, 2, b - a)
    sides[:, :, b:] = -np.inf
    j, found = _first_stop(lpw[:, 1:].reshape(2 * m, b - a), lp0.repeat(2))
    redo = (~found | (j == 0)).reshape(m, 2).any(axis=1)
    redo &= np.isfinite(lp0)  # a non-finite start is reported by the caller
    stops, founds = (j + a).reshape(m, 2), found.reshape(m, 2)  # as on the whole row
    if redo.any():
        r = np.flatnonzero(redo)
        lp[r] = _evaluate(target, position[r], i, np.concatenate(
            [z0[r, None], z0[r, None] - offsets[r], z0[r, None] + offsets[r]], axis=1),
            allow_inf=True)
        j, found = _first_stop(lp[r, 1:].reshape(2 * len(r), J), lp[r, 0].repeat(2))
        stops[r], founds[r] = j.reshape(-1, 2), found.reshape(-1, 2)
    return lp, stops, founds


def _first_stop(lp, lp0):
    """Index of the first outward offset where ``lp`` falls _DROP below the running maximum.

    ``lp`` is (m, J), ordered outward; -inf (outside the support) also stops. Returns
    (index (m,), found (m,)).
    """
    running = np.maximum(np.maximum.accumulate(lp, axis=1), lp0[:, None])
    stop = lp < running - _DROP  # never nan: _evaluate maps nan to -inf
    return stop.argmax(axis=1), stop.any(axis=1)


def _find_edges(target, position, i, z0, inner, outer, sign):
    """Locate truncation edges by multisection between a finite and a -inf offset.

    Returns the outermost offset found with a finite log-density (within ~1e-9 of
    ``outer - inner`` of the edge), for rows (m,) moving in direction ``sign``.
    """
    t = _unit_steps(_EDGE_POINTS + 2)[1:-1]
    m = len(inner)
    rows = np.arange(m)
    ext = np.empty((m, _EDGE_POINTS + 2))  # inner, the offsets tried, outer
    bad = np.empty((m, _EDGE_POINTS + 1), dtype=bool)
    bad[:, -1] = True  # the first bad point is then ``outer`` when every point tried is finite
    for _ in range(_EDGE_PASSES):
        ext[:, 0], ext[:, -1] = inner, outer
        offs = ext[:, 1:-1]
        np.add(inner[:, None], (outer - inner)[:, None] * t, out=offs)
        lp = _evaluate(target, position, i, z0[:, None] + sign[:, None] * offs)
        np.logical_not(np.isfinite(lp), out=bad[:, :-1])
        first_bad = bad.argmax(axis=1)
        inner, outer = ext[rows, first_bad], ext[rows, first_bad + 1]
    return inner


def _adapted_nodes(nodes, logp, count):
    """Redistribute grid nodes (same ends, ``count`` of them) to even out interpolation error.

    Interpolating the log-density linearly on a segment of width ``h`` misplaces
    about ``p h**3 |l''| / 12`` of probability (``p`` the density, ``l''`` the
    curvature of the log-density); with a node density ``rho`` the total is
    ``int p |l''| rho**-2``, smallest for ``rho ~ (p |l''|)**(1/3)``. That density,
    estimated from the current grid, gets ``1 - _UNIFORM_SHARE`` of the nodes; the
    rest stay evenly spread so no stretch is left without nodes.
    """
    n, g = nodes.shape
    h = nodes[:, 1:] - nodes[:, :-1]
    l = logp - logp.max(axis=1, keepdims=True)
    finite = np.isfinite(l)
    all_finite = finite.all()
    lf = l if all_finite else np.where(finite, l, 0.0)
    slope = (lf[:, 1:] - lf[:, :-1]) / h
    curv = np.empty((n, g))
    np.divide(np.abs(slope[:, 1:] - slope[:, :-1]), 0.5 * (h[:, 1:] + h[:, :-1]), out=curv[:, 1:-1])
    curv[:, 0], curv[:, -1] = curv[:, 1], curv[:, -2]
    # density (an upper bound on the segment) times curvature; 0 where an end is not finite
    m = np.exp(np.maximum(lf[:, 1:], lf[:, :-1])) * np.maximum(curv[:, 1:], curv[:, :-1])
    if not all_finite:
        m[~(finite[:, 1:] & finite[:, :-1])] = 0.0
    m = np.cbrt(m)
    mass = (m * h).sum(axis=1, keepdims=True)
    width = nodes[:, -1:] - nodes[:, :1]
    if (mass > 0).all():
        rho = (1.0 - _UNIFORM_SHARE) * m / mass + _UNIFORM_SHARE / width
    else:
        rho = np.where(mass > 0, (1.0 - _UNIFORM_SHARE) * m / np.where(mass > 0, mass, 1.0), 0.0)
        rho = rho + np.where(mass > 0, _UNIFORM_SHARE, 1.0) / width
    q = np.empty((n, g))
    q[:, 0] = 0.0
    (rho * h).cumsum(axis=1, out=q[:, 1:])
    q /= q[:, -1:]
    out = _interp_rows(_unit_steps(count), q, nodes)
    out[:, 0], out[:, -1] = nodes[:, 0], nodes[:, -1]
    return out


@functools.lru_cache(maxsize=None)
def _unit_steps(count):
    """``np.linspace(0, 1, count)``, made once per ``count`` (read-only)."""
    t = np.linspace(0.0, 1.0, count)
    t.flags.writeable = False
    return t


def _unit(x):
    """``x`` clipped to [0, 1] (``np.clip``'s dispatch costs more than the two ufuncs here)."""
    return np.minimum(np.maximum(x, 0.0), 1.0)


def _interp_rows(t, xp, fp):
    """``np.interp(t, xp[k], fp[k])`` for every row ``k`` at once; rows of ``xp`` rise in [0, 1]."""
    n, g = xp.shape
    row = np.arange(n)[:, None]
    shift = 2.0 * row  # rows apart, so one sorted search serves them all
    j = np.searchsorted((xp + shift).ravel(), (t + shift).ravel(), side="right").reshape(n, -1)
    first = g * row  # j - 1 is a flat index: keep it within its row's segments
    j = np.minimum(np.maximum(j - 1, first), first + (g - 2))
    xf, ff = xp.ravel(), fp.ravel()
    x0, x1 = xf[j], xf[j + 1]
    f0 = ff[j]
    with np.errstate(all="ignore"):
        w = np.where(x1 > x0, (t - x0) / (x1 - x0), 1.0)
    return f0 + _unit(w) * (ff[j + 1] - f0)


_HALVES = 0.5 ** np.arange(_GRADED, 0, -1)  # 2**-_GRADED ... 1/2 of the end segment from the end


def _graded_ends(nodes):
    """Add ``_GRADED`` nodes in each end segment, halving the distance to the end each time.

    At a truncation edge the log-density may fall like ``a log(distance)`` (a gamma at 0):
    geometric spacing resolves that at every scale, where even spacing cannot.
    """
    n, g = nodes.shape
    out = np.empty((n, g + 2 * _GRADED))
    out[:, :1] = nodes[:, :1]
    out[:, 1:1 + _GRADED] = nodes[:, :1] + (nodes[:, 1:2] - nodes[:, :1]) * _HALVES
    out[:, 1 + _GRADED:_GRADED + g - 1] = nodes[:, 1:-1]
    out[:, _GRADED + g - 1:-1] = nodes[:, -1:] - (nodes[:, -1:] - nodes[:, -2:-1]) * _HALVES[::-1]
    out[:, -1:] = nodes[:, -1:]
    return out


@functools.lru_cache(maxsize=None)
def _runs(m):
    """Nodes of the runs of four left and right of each of ``m - 1`` segments: (3, 2, m - 1).

    ``[l, 0, j]`` is node ``l`` of run ``j-1..j+2`` of segment ``j``, ``[l, 1, j]`` of run
    ``j..j+3`` (both shifted inwards at the ends), for ``l = 0, 1, 2``.
    """
    seg = np.arange(m - 1)
    k = np.stack([np.clip(seg - 1, 0, m - 4), np.clip(seg, 0, m - 4)])
    runs = np.stack([k, k + 1, k + 2])
    runs.flags.writeable = False
    return runs


def _refined(nodes, logp, pieces):
    """Split every segment of ``nodes`` (n, m) into ``pieces``; log-densities by local cubics.

    Returns nodes and log-densities (n, (m - 1) * pieces + 1). The log-density at a new
    node is the mean of the two cubics through four neighbouring evaluated nodes (nodes
    ``j-1..j+2`` and ``j..j+3`` for segment ``j``, shifted inwards at the ends; error
    ``~h**4``, exact for a Gaussian), or the straight line between the segment's ends where
    those two disagree by more than their correction to the line (the log-density is not
    smooth at this spacing: a power-law edge, a kink) or a node is not finite (-inf at an
    end of the segment stays -inf).
    """
    # Work arrays keep the segments on the last axis, (n, [run,] piece, segment), so every
    # broadcast loops over the long axis; the result is interleaved once at the end.
    n, m = nodes.shape
    h = nodes[:, 1:] - nodes[:, :-1]
    start = nodes[:, :-1]
    t = h[:, None, :] * (np.arange(pieces) / pieces)[:, None]  # (n, pieces, m - 1): offsets
    finite = np.isfinite(logp)
    all_finite = finite.all()
    y = logp if all_finite else np.where(finite, logp, 0.0)
    # Newton's divided differences of every run of four nodes k..k+3
    d1 = (y[:, 1:] - y[:, :-1]) / h
    d2 = (d1[:, 1:] - d1[:, :-1]) / (nodes[:, 2:] - nodes[:, :-2])
    d3 = (d2[:, 1:] - d2[:, :-1]) / (nodes[:, 3:] - nodes[:, :-3])
    runs = _runs(m)
    k = runs[0]
    # offsets of each segment's pieces from node l of its left and right runs: (n, 2, pieces, m - 1)
    gap = (start[:, None, None, :] - nodes.take(runs, axis=1))[:, :, :, None, :]
    tt = t[:, None]
    la, lb = logp[:, None, :-1], logp[:, None, 1:]
    with np.errstate(all="ignore"):
        # the left and right cubics of every segment at once (axis 1), in Newton form
        c = y.take(k, axis=1)[:, :, None] + (gap[:, 0] + tt) * (
            d1.take(k, axis=1)[:, :, None] + (gap[:, 1] + tt) * (
                d2.take(k, axis=1)[:, :, None] + (gap[:, 2] + tt) * d3.take(k, axis=1)[:, :, None]))
        c_left, c_right = c[:, 0], c[:, 1]
        mid = 0.5 * (c_left + c_right)
        line = la + (lb - la) * (t / h[:, None, :])
        if not all_finite:
            line = np.where(np.isfinite(la) & np.isfinite(lb), line, -np.inf)
        smooth = np.abs(c_left - c_right) <= np.abs(mid - line)
    if not all_finite:
        ok = finite[:, :-3] & finite[:, 1:-2] & finite[:, 2:-1] & finite[:, 3:]
        smooth &= (ok.take(k[0], axis=1) & ok.take(k[1], axis=1))[:, None, :]
    out_nodes = np.empty((n, (m - 1) * pieces + 1))
    out_logp = np.empty((n, (m - 1) * pieces + 1))
    np.copyto(out_nodes[:, :-1].reshape(n, m - 1, pieces), (start[:, None, :] + t).transpose(0, 2, 1))
    np.copyto(out_logp[:, :-1].reshape(n, m - 1, pieces), np.where(smooth, mid, line).transpose(0, 2, 1))
    out_nodes[:, -1], out_logp[:, -1] = nodes[:, -1], logp[:, -1]
    return out_nodes, out_logp


class GridConditional:
    """Numeric conditional distributions of one coordinate, one per chain.

    The log-density along coordinate ``i`` (the other coordinates held at each
    chain's values) is evaluated on a grid and interpolated linearly, so the
    density is piecewise exponential; it is integrated exactly segment by
    segment, and ``cdf``/``ppf`` are exact inverses of each other for this
    approximation. Everything is on the sampler's scale.

    Attributes
    ----------
    coordinate : int
    nodes : ndarray, shape (n_chains, n_nodes)
        ``n_nodes`` is ``4 * (grid_size // 4) - 3`` from ``from_target`` (509 for 512).
        Grid on the sampler's scale (increasing in each row).
    log_density : ndarray, shape (n_chains, n_nodes)
        Log-density at the nodes, shifted so each row's maximum is 0 (from
        ``from_target``: evaluated at a quarter of the nodes, interpolated at
        the others).
    cum : ndarray, shape (n_chains, n_nodes)
        The approximate CDF at the nodes (0 at the first node, 1 at the last).
    """

    def __init__(self, coordinate, nodes, log_density):
        self.coordinate = coordinate
        self.nodes = nodes
        self.log_density = log_density - log_density.max(axis=1, keepdims=True)
        self._h = nodes[:, 1:] - nodes[:, :-1]
        la, lb = self.log_density[:, :-1], self.log_density[:, 1:]
        finite = np.isfinite(self.log_density)
        ok = None if finite.all() else finite[:, :-1] & finite[:, 1:]
        if ok is not None:
            la, lb = np.where(ok, la, 0.0), np.where(ok, lb, 0.0)
        self._d = lb - la  # log-density change across each segment
        nad = -np.abs(self._d)
        with np.errstate(divide="ignore", invalid="ignore"):
            # integral of exp(linear) over a segment = h * exp(max) * (1 - exp(-|d|)) / |d|
            w = np.expm1(nad) / nad
        flat = nad >= -_FLAT
        if flat.any():
            w[flat] = 1.0 + 0.5 * nad[flat]
        seg = self._h * np.exp(np.maximum(la, lb)) * w
        self._seg = seg if ok is None else np.where(ok, seg, 0.0)
        total = self._seg.cumsum(axis=1)
        self._norm = total[:, -1]
        self.cum = np.empty(nodes.shape)
        self.cum[:, 0] = 0.0
        np.divide(total, self._norm[:, None], out=self.cum[:, 1:])

    @classmethod
    def from_target(cls, target, position, i, grid_size=DEFAULT_GRID_SIZE):
        """Build the conditionals of coordinate ``i`` at each row of ``position``.

        Parameters
        ----------
        target : Target
        position : ndarray, shape (n_chains, dim)
            Sampler scale; each row must have a finite log-density.
        i : int
        grid_size : int

        Returns
        -------
        GridConditional
        """
        n = position.shape[0]
        z0 = position[:, i].astype(float)
        rows = np.arange(n)
        # 1. bracket: offsets scale * 2**j, j = -40..40, on both sides (j = -8..8 first)
        scale = np.maximum(1.0, np.abs(z0))
        offsets = scale[:, None] * _BRACKET_STEPS[None, :]
        J = offsets.shape[1]
        lp, stops, founds = _bracket_log_density(target, position, i, z0, offsets)
        lp0 = lp[:, 0]
        if not np.all(np.isfinite(lp0)):
            k = int(np.flatnonzero(~np.isfinite(lp0))[0])
            raise ValueError(
                f"the log-density is not finite at the current state of chain {k} "
                f"({target.to_user(position[k])}); cannot build the conditional of coordinate {i}"
            )
        sides = lp[:, 1:].reshape(n, 2, J)  # (chain, side, offset), sides - then +
        some_inf = (lp == np.inf).any()
        if some_inf or not founds.all():
            for side, sign in enumerate((-1.0, 1.0)):
                side_lp, j, found = sides[:, side], stops[:, side], founds[:, side]
                if not found.all():
                    k = int(np.flatnonzero(~found)[0])
                    raise ValueError(
                        f"the conditional of coordinate {i} (chain {k}) could not be bracketed: the "
                        f"log-density stays within {_DROP:g} nats of its maximum out to an offset of "
                        f"{sign * offsets[k, -1]:.3g} from x = {target.to_user(position[k])}. Is the "
                        "target a proper (normalisable) distribution?"
                    )
                # +inf only matters inside the bracket (far offsets may overflow harmlessly)
                inside_lp = np.where(np.arange(J)[None, :] <= j[:, None], side_lp, 0.0)
                if np.any(inside_lp == np.inf):
                    pts = np.repeat(position[:, None, :], J, axis=1)
                    pts[:, :, i] = z0[:, None] + sign * offsets
                    _no_inf(target, inside_lp, pts, i)
        ends = offsets[rows[:, None], stops]  # (chain, side)
        # a -inf stop is a truncation edge between the previous offset and this one
        truncated = ~np.isfinite(sides[rows[:, None], _SIDES, stops])
        if truncated.any():
            edges = []
            for side, sign in enumerate((-1.0, 1.0)):
                j = stops[:, side]
                e = np.flatnonzero(truncated[:, side])
                if len(e):
                    inner = np.where(j[e] > 0, offsets[e, np.maximum(j[e] - 1, 0)], 0.0)
                    edges.append((e, np.full(len(e), sign), inner))
            e = np.concatenate([e for e, _, _ in edges])
            sign = np.concatenate([s for _, s, _ in edges])
            inner = np.concatenate([v for _, _, v in edges])
            side = (sign > 0).astype(int)
            outer = ends[e, side]
            ends[e, side] = _find_edges(target, position[e], i, z0[e], inner, outer, sign)
        lo, hi = z0 - ends[:, 0], z0 + ends[:, 1]
        # 2. coarse equispaced grid, re-gridded onto the region within _DROP nats of the
        #    maximum while that region is narrow (a bracket far wider than the mass)
        coarse = max(16, grid_size // _COARSE_SHARE)
        t = _unit_steps(coarse)
        nodes = nd = lo[:, None] + (hi - lo)[:, None] * t
        logp = lpa = _evaluate(target, position, i, nd)
        active = rows
        for regrid in range(_MAX_REGRID + 1):
            keep = lpa >= lpa.max(axis=1, keepdims=True) - _DROP
            a = np.maximum(keep.argmax(axis=1) - 1, 0)
            b = np.minimum(coarse - keep[:, ::-1].argmax(axis=1), coarse - 1)
            narrow = (b - a) < (coarse - 1) // 4
            if regrid == _MAX_REGRID or not narrow.any():
                break
            r = np.arange(len(active))[narrow]
            active = active[narrow]
            lo[active], hi[active] = nd[r, a[narrow]], nd[r, b[narrow]]
            nd = lo[active, None] + (hi - lo)[active, None] * t[None, :]
            lpa = _evaluate(target, position[active], i, nd)
            if regrid == 0:
                logp = logp.copy()  # it may be the array the user's function returned
            nodes[active], logp[active] = nd, lpa
        # 3. place grid_size // 4 nodes where interpolation error lives, evaluate there, and
        #    split every segment in four, log-densities from local cubics
        nodes = _graded_ends(_adapted_nodes(nodes, logp, max(16, grid_size // _REFINE) - 2 * _GRADED))
        logp = _evaluate(target, position, i, nodes)
        nodes, logp = _refined(nodes, logp, _REFINE)
        return cls(i, nodes, logp)

    def cdf(self, z):
        """Approximate conditional CDF at ``z`` (n_chains,), sampler scale; 0 or 1 off the grid."""
        z = np.asarray(z, dtype=float)
        nodes, rows = self.nodes, np.arange(len(self.nodes))
        j = np.minimum(np.maximum((nodes <= z[:, None]).sum(axis=1) - 1, 0), nodes.shape[1] - 2)
        s = _unit((z - nodes[rows, j]) / self._h[rows, j])
        d = self._d[rows, j]
        rising = d > 0
        a = np.where(rising, -d, d)  # -|d|: expm1(a s) / expm1(a) cannot overflow
        with np.errstate(all="ignore"):
            # fraction of the segment's mass below s, for density exp(la + d s):
            # expm1(d s) / expm1(d), times exp(-d) / exp(-d) where d > 0
            frac = np.where(rising, np.exp(d * (s - 1.0)), 1.0) * np.expm1(a * s) / np.expm1(a)
        frac = np.where(np.abs(d) <= _FLAT, s, frac)
        out = self.cum[rows, j] + frac * self._seg[rows, j] / self._norm
        out = np.where(z <= nodes[:, 0], 0.0, np.where(z >= nodes[:, -1], 1.0, out))
        return _unit(out)

    def ppf(self, u):
        """Inverse of ``cdf``: the point (n_chains,) on the sampler's scale with CDF ``u``."""
        u = _unit(np.asarray(u, dtype=float))
        rows = np.arange(len(self.nodes))
        j = np.minimum((self.cum[:, 1:] < u[:, None]).sum(axis=1), self.nodes.shape[1] - 2)
        seg = self._seg[rows, j]
        with np.errstate(all="ignore"):
            q = np.where(seg > 0, (u - self.cum[rows, j]) * self._norm / seg, 0.0)
            q = _unit(q)
            d = self._d[rows, j]
            sd = np.where(np.abs(d) > _FLAT, d, 1.0)
            up = 1.0 + np.log(q + (1.0 - q) * np.exp(-sd)) / sd
            down = np.log1p(q * np.expm1(sd)) / sd
        s = np.where(np.abs(d) <= _FLAT, q, np.where(d > 0, up, down))
        return self.nodes[rows, j] + _unit(s) * self._h[rows, j]

    def __repr__(self):
        n, g = self.nodes.shape
        return f"GridConditional(coordinate={self.coordinate}, {n} chains, {g} nodes)"


# ------------------------------------------------------------------------------ the kernel
class Gibbs(Kernel):
    """Systematic-scan Gibbs sampling by inverse CDF, with an optional deterministic shift.

    A transition updates coordinates ``0, ..., dim-1`` in turn: coordinate ``i`` of
    each chain moves to ``x_i' = F^-1(u_i | x_-i)``. With ``shift=None`` every
    ``u_i`` is a fresh uniform (ordinary Gibbs sampling). With a shift ``c`` the
    uniforms are part of the chain's state (``state.extra["u"]``, one per
    coordinate and chain, drawn from the stream at the start) and each update
    continues with ``u_i <- F(old x_i | x_-i)`` then ``u_i <- (u_i + c) mod 1``:
    the deterministic-shift scheme described in R. M. Neal, "How to view an MCMC
    simulation as a permutation, with applications to parallel simulation and
    improved importance sampling" (arXiv:1205.0070); see also I. Murray &
    L. T. Elliott, "Driving Markov chain Monte Carlo with a dependent random
    stream" (2012). ``shift="random"`` draws a fresh ``c`` each transition.

    Parameters
    ----------
    conditionals : callable, optional
        ``conditionals(i, x)`` with ``x`` one chain's full state, shape (dim,), on
        the user's scale, returns the conditional distribution of ``x[i]`` given
        the rest as an object with ``cdf`` and ``ppf`` methods (a frozen
        ``scipy.stats`` distribution works). It is called once per chain and
        coordinate. When every chain gets a frozen ``scipy.stats`` distribution
        of one common family (normal, truncated normal, uniform, exponential,
        gamma, inverse gamma, beta, log-normal, Student t, Cauchy, Laplace,
        logistic, half-normal, chi-squared, Weibull), its ``ppf`` and ``cdf``
        are called once for all chains with their parameters stacked: the same
        numbers, bit for bit, as one call per chain. For speed, build it with
        ``pg.freeze(scipy.stats.norm, loc, scale)`` rather than
        ``scipy.stats.norm(loc, scale)``: the same frozen distribution, without
        the ~0.4 ms scipy spends setting up each one inside your function
        (more than a whole sweep costs otherwise; ``benchmarks/core.py
        --gibbs-only``). For a truncated normal, scipy's own ``truncnorm``
        functions are slow too; ``pg.NormalConditional(mean, sd, low=, high=)``
        gives the same numbers to round-off in a fraction of the time. ``None``
        builds each conditional numerically from the target's log-density (see
        Notes).
    shift : None, "random" or float in [0, 1)
        ``None`` for ordinary Gibbs sampling, else the shift ``c`` of the driving
        uniforms. ``shift=0`` is allowed so the failure it causes can be shown:
        the chain is then a deterministic map and does not explore (see Notes).
    shared_stream : bool
        All chains consume the same random numbers (the ``Sampler`` reads this
        once, when it is created). Ordinary Gibbs chains driven by one stream
        then coalesce on targets where the inverse-CDF update contracts (a
        coupling: once they meet, the chains have forgotten their starts);
        shift-driven chains never merge, since their update is a bijection of
        (x, u).
    grid_size : int >= 16
        Nodes of the grid of each numeric conditional (ignored with
        ``conditionals``); a quarter of them are evaluated (see Notes).
    vectorized : bool
        Call ``conditionals(i, x)`` once per coordinate for all chains at once,
        with ``x`` of shape (dim, n_chains): ``x[j]`` holds coordinate ``j`` of
        every chain, so a function written for one chain that reads ``x[j]``
        and uses elementwise numpy (a frozen ``scipy.stats`` distribution with
        array parameters, say) usually works unchanged. What it returns must
        give ``ppf``/``cdf`` one value per chain, shape (n_chains,). A function
        that mixes chains (``np.sum(x)``, ``x @ A``) samples something else:
        the start of a run compares one batched call with per-chain calls at
        the starting states and refuses a mismatch. Ignored with numeric
        conditionals.

    Attributes
    ----------
    conditionals, shift, shared_stream, grid_size, vectorized
        Validated on assignment; a widget may change ``shift`` (or switch
        between modes) between transitions.

    Raises
    ------
    TypeError, ValueError
        For a bad argument, at construction or on assignment, naming it.
    RuntimeError
        During sampling, when the user's ``conditionals`` (or the ``cdf``/``ppf``
        of what it returned) raises; the message names the coordinate and
        chain, and the original exception is the ``__cause__``.
    ValueError
        During sampling, when a user's distribution returns a non-finite draw or
        a CDF outside [0, 1], moves a chain where the target's log-density is
        not finite, or when a numeric conditional cannot be built (an improper
        target, a density that is +inf somewhere).

    Notes
    -----
    *Records.* ``run.u`` has shape (chains, draws, dim): the uniforms the
    inverse CDFs were applied to. ``accepted`` is always True, ``accept_prob``
    1, ``energy`` the negative log-density of the new state (sampler scale),
    ``step_size`` nan.

    *Why a shift.* With ``c = 0`` the update ``(x_i, u_i) -> (F^-1(u_i),
    F(x_i))`` is a deterministic volume-preserving map once ``u`` is drawn: in
    one dimension it just swaps two points forever; on a Gaussian N(m, S) it
    conserves ``(x - m)' S^-1 (x - m) + sum_i Phi^-1(u_i)^2`` (an update of
    ``x_i`` swaps its standardised conditional deviate with ``Phi^-1(u_i)``), so
    each chain stays on one ellipsoid of the extended space.
    Any shift ``c > 0`` adds the perturbation that breaks this in two or more
    dimensions. In one dimension a fixed shift is not enough: every second
    draw is then a fixed function of the start (the chain never forgets it,
    which simulation-based calibration shows at once), so use
    ``shift="random"`` or ordinary Gibbs for a one-coordinate target. Ordinary Gibbs
    also updates ``state.extra["u"]`` (to ``F(old x_i)``), so switching from
    ``shift=None`` to a shift mid-run starts from correctly distributed
    uniforms.

    *Numeric conditionals* (``conditionals=None``) are built on the sampler's
    scale, from ``target.log_density``, which includes the log-Jacobian of any
    declared ``bounds``; so they are exact conditionals of the distribution the
    sampler sees, and since the transforms act per coordinate and are monotone,
    updating a transformed coordinate is updating the user's coordinate (``u``
    is then the user-scale CDF value, or one minus it for an upper-bound-only
    coordinate). For each coordinate, vectorised over chains:

    1. bracket the support: offsets ``+-max(1, |z|) * 2**j``, ``j = -40..40``;
       on each side stop at the first offset that falls 25 nats below the
       running maximum. ``j = -8..8`` are evaluated first, in one batch; only a
       chain whose search does not stop inside that window (past its first
       offset) is evaluated at all 81 offsets. A stop where the log-density is
       -inf (outside a truncation; nan counts as -inf) is refined to the edge
       by multisection (6 passes of 32 points, to ~8e-10 of its bracket);
    2. evaluate ``grid_size // 16`` equispaced nodes across the bracket (one
       ``log_density`` call on an (n_chains * nodes, dim) batch), re-gridding
       onto the region within 25 nats of the maximum while that spans under a
       quarter of the grid;
    3. place ``grid_size // 4`` nodes where interpolation error lives (node
       density ``~ (p |(log p)''|)**(1/3)`` for 80% of them, even spacing for
       the rest, then 3 in each end segment, halving the distance to the end,
       for power-law edges) and evaluate there;
    4. split each segment between evaluated nodes in four (``4 * (grid_size
       // 4) - 3`` nodes in all) and interpolate the log-density there by the
       cubics through the four nearest evaluated nodes (the mean of the two
       such runs; the straight line where they disagree by more than the
       cubic's correction to the line, i.e. where the log-density is not
       smooth at this spacing); between those nodes
       the log-density is linear and the resulting piecewise-exponential
       density is integrated exactly; ``F`` and ``F^-1`` are then exact
       inverses of each other (to ~1e-15).

    A conditional costs ``35 + grid_size // 16 + grid_size // 4`` evaluations
    (195 for the default; 163 more for a chain whose bracket needs all the
    offsets, ``grid_size // 16`` more per re-grid, 192 more per truncation
    edge); one more per chain and transition gives the new state's
    log-density. (Before issue 13: ``163 + 2 * grid_size``, 6 times more.)

    Accuracy, the largest CDF error against ``scipy.stats`` (measured; the
    tests check it): with the default 512 nodes, 5e-8 for a normal truncated
    by -inf outside, 3e-6 for the same with declared bounds (logit scale),
    2e-6 to 5e-6 for gammas of shape 2.5 (-inf below 0, or declared bounds)
    and 0.7.
    With 128 nodes (32 evaluated): 9e-7 to 3e-4 for the same cases. Mass
    beyond the 25-nat cut-off (~1e-11) is dropped; a current value beyond it
    gets ``F = 0`` or ``1``.

    Limits: the grid follows the current value of ``x_i``, so the
    approximation differs slightly from update to update and the shift
    scheme is a bijection only up to the approximation error. Only the stretch
    of support that contains the current value is found: a conditional whose
    support has gaps is sampled within one piece (holes inside the bracket are
    handled, to within a grid cell). The density must be finite: declare
    ``bounds`` for a coordinate whose density is unbounded at an edge (a gamma
    with shape < 1), or pass exact ``conditionals``.

    Examples
    --------
    >>> import numpy as np, phaseglass as pg
    >>> t = pg.Target(lambda x: -0.5 * np.sum(x * x, axis=-1), lambda x: -x, dim=2,
    ...               vectorized=True)
    >>> run = pg.sample(t, pg.Gibbs(shift=0.381966), n_draws=100, n_chains=2, seed=1)
    >>> run.u.shape
    (2, 100, 2)
    """

    uses_gradient = False
    tuned_knob = None
    u_per_coordinate = True
    conditionals = _Knob(_check_conditionals)
    shift = _Knob(_check_shift)
    shared_stream = _Knob(_check_flag)
    grid_size = _Knob(_check_grid_size)
    vectorized = _Knob(_check_flag)

    def __init__(self, conditionals=None, shift=None, shared_stream=False, *,
                 grid_size=DEFAULT_GRID_SIZE, vectorized=False):
        self.conditionals = conditionals
        self.shift = shift
        self.shared_stream = shared_stream
        self.grid_size = grid_size
        self.vectorized = vectorized

    # ---------------------------------------------------------------- state
    def prepare(self, target):
        super().prepare(target)
        if target.dim == 1 and isinstance(self.shift, float):
            warnings.warn(
                "a fixed `shift` on a one-coordinate target never forgets the start (every "
                "second draw is a fixed function of it); use shift='random' or shift=None",
                UserWarning, stacklevel=4,
            )

    def init_extra(self, target, state, streams):
        """The driving uniforms ``u``, shape (n_chains, dim), drawn from the stream."""
        if self.conditionals is not None and self.vectorized:
            self._check_vectorized(target, target.to_user(state.position))
        if self.conditionals is not None:
            problems = self.check_conditionals(target, target.to_user(state.position[0]))
            if problems:
                warnings.warn("the Gibbs `conditionals` do not match the target: " + problems[0]
                              + (f" (and {len(problems) - 1} more)" if len(problems) > 1 else "")
                              + "; the chains would sample another distribution",
                              UserWarning, stacklevel=user_stacklevel())
        return {"u": streams.uniform(state.position.shape[1])}

    def check_conditionals(self, target, x, *, probs=(0.2, 0.5, 0.8), tol=1e-3):
        """Compare the user's ``conditionals`` with the target's log-density at ``x``.

        For each coordinate ``i``, the conditional's log-density differences between
        three of its own quantiles must equal the target's log-density differences
        along coordinate ``i`` (the normalising constant cancels in a difference).
        A cheap check (three points per coordinate), run once when a Sampler is
        created; call it at other points to look harder.

        Parameters
        ----------
        target : Target
        x : array_like, shape (dim,)
            A point on the user's scale inside the support.

        Returns
        -------
        list of str
            One sentence per mismatched coordinate (empty when they agree).
        """
        if self.conditionals is None:
            return []
        x = np.asarray(x, dtype=float)
        problems = []
        counts = (target.n_density, target.n_grad)
        try:
            for i in range(target.dim):
                try:
                    dist = self._user_conditional(i, 0, x)
                    with np.errstate(all="ignore"):
                        v = np.array([float(dist.ppf(p)) for p in probs])
                        if not np.all(np.isfinite(v)) or np.ptp(v) == 0:
                            continue
                        cond = _conditional_logpdf(dist, v)
                        pts = np.repeat(x[None, :], len(v), axis=0)
                        pts[:, i] = v
                        full = target._call_logp(pts)
                except Exception:  # the sweep itself reports user-code errors with context
                    continue
                with np.errstate(all="ignore"):
                    d_cond, d_full = cond - cond[1], full - full[1]
                    gap = np.abs(d_cond - d_full)
                    off = np.any(gap > tol * (1.0 + np.abs(d_full)))
                if not np.all(np.isfinite(gap)) or off:
                    problems.append(
                        f"along {target.names[i]} at x = {np.round(x, 4).tolist()}, log-density "
                        f"differences between the conditional's {probs[0]:g}, {probs[1]:g} and "
                        f"{probs[2]:g} quantiles are {np.round(d_cond, 3).tolist()} under "
                        f"`conditionals` but {np.round(d_full, 3).tolist()} under the target")
        finally:
            target.n_density, target.n_grad = counts  # a check is not sampling work
        return problems

    def _check_vectorized(self, target, x):
        """Refuse ``vectorized=True`` conditionals whose batched answers differ from per-chain ones.

        ``x`` (n_chains, dim) on the user's scale: the starting states.
        """
        n = len(x)
        q = np.linspace(0.2, 0.8, n) if n > 1 else np.array([0.3])
        for i in range(target.dim):
            with np.errstate(all="ignore"):
                batch = self._batched_values(target, x, i, q)
                single = np.array([[_scalar(d.ppf, q[k], "ppf", i, k, x[k]),
                                    _scalar(d.cdf, x[k, i], "cdf", i, k, x[k])]
                                   for k, d in enumerate(self._user_conditional(i, k, x[k])
                                                         for k in range(n))]).T
            same = np.isclose(batch, single, rtol=1e-10, atol=1e-300) | (
                np.isnan(batch) & np.isnan(single))
            if not same.all():
                what, k = np.argwhere(~same)[0]
                name = ("ppf", "cdf")[what]
                raise ValueError(
                    f"`conditionals` with vectorized=True: called for all chains at once (x of shape "
                    f"(dim, n_chains)), coordinate {i}'s {name} gives {batch[what, k]!r} for chain {k}, "
                    f"called with that chain alone {single[what, k]!r}. Does it mix chains (a sum "
                    "over x, x @ A)? Write it with x[j] and elementwise operations, or pass "
                    "vectorized=False"
                )

    def _batched_values(self, target, x, i, u):
        """``(ppf(u), cdf(x[:, i]))`` (2, n_chains) from one ``conditionals(i, x.T)`` call."""
        n = len(x)
        dist = self._user_conditional(i, None, x.T, context=(
            f"all {n} chains at once, x of shape {(x.shape[1], n)}: vectorized=True"))
        fast = frozen_values(dist, u, x[:, i])  # a frozen scipy.stats family: one call each
        if fast is not None:
            return np.stack(fast)
        out = np.empty((2, n))
        for row, (what, arg) in enumerate((("ppf", u), ("cdf", x[:, i]))):
            try:
                v = np.asarray(getattr(dist, what)(arg), dtype=float)
            except Exception as err:
                raise RuntimeError(
                    f"`conditionals({i}, x).{what}` raised {type(err).__name__}: {err} "
                    f"(coordinate {i}, all {n} chains at once: vectorized=True)"
                ) from err
            if v.shape != (n,):
                raise ValueError(
                    f"`conditionals({i}, x).{what}` must return one value per chain, shape ({n},), "
                    f"with vectorized=True; got shape {v.shape} (coordinate {i})"
                )
            out[row] = v
        return out

    # ----------------------------------------------------------- transition
    def _transition(self, target, state, streams, record):
        n, dim = state.position.shape
        u = state.extra.get("u")
        if u is None or np.shape(u) != (n, dim):
            u = streams.uniform(dim)
        u = np.array(u, dtype=float)
        shift = self.shift
        if shift is None:
            fresh = streams.uniform(dim)
        elif shift == "random":
            c = streams.uniform()
        else:
            c = np.full(n, shift)
        used = np.empty((n, dim))
        numeric = self.conditionals is None
        # the sweep works on the sampler's scale (numeric) or on the user's (their conditionals)
        work = state.position.copy() if numeric else target.to_user(state.position)
        for i in range(dim):
            used[:, i] = fresh[:, i] if shift is None else u[:, i]
            if numeric:
                f_old = self._numeric_step(target, work, i, used[:, i])
            else:
                f_old = self._user_step(target, work, i, used[:, i])
            u[:, i] = f_old if shift is None else np.mod(f_old + c, 1.0)
        z = work if numeric else target.from_user(work)
        with np.errstate(all="ignore"):
            logp = np.asarray(target.log_density(z), dtype=float)
        bad = ~np.isfinite(logp) | ~np.all(np.isfinite(z), axis=1)
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            why = ("the numeric conditional left the support (does it have gaps?)" if numeric
                   else "the `conditionals` do not match the target's support")
            raise ValueError(
                f"Gibbs moved chain {k} to x = {target.to_user(z[k])}, where the log-density is "
                f"{logp[k]}: {why}"
            )
        state.position, state.logp = z, logp
        state.extra["u"] = u
        return {
            "accepted": np.ones(n, dtype=bool),
            "accept_prob": np.ones(n),
            "energy": -logp,
            "energy_error": np.zeros(n),
            "divergent": np.zeros(n, dtype=bool),
            "n_grad": np.zeros(n, dtype=int),
            "u": used,
            "step_size": np.full(n, np.nan),
            "trajectory": None,
        }

    def _numeric_step(self, target, z, i, u):
        """Update coordinate ``i`` of ``z`` (sampler scale, in place); return F(old z_i)."""
        cond = GridConditional.from_target(target, z, i, self.grid_size)
        f_old = cond.cdf(z[:, i])
        z[:, i] = cond.ppf(u)
        return f_old

    def _user_step(self, target, x, i, u):
        """Update coordinate ``i`` of ``x`` (user scale, in place); return F(old x_i)."""
        lo, hi = target.bounds
        # open (0, 1): u = 0 happens with probability 2**-53 and would give ppf = -inf
        u = np.clip(u, np.nextafter(0.0, 1.0), np.nextafter(1.0, 0.0))
        if self.vectorized:
            new, f_old = self._batched_values(target, x, i, u)
            bad = np.flatnonzero(~np.isfinite(new) | ~((f_old >= 0.0) & (f_old <= 1.0)))
            if len(bad):
                k = int(bad[0])
                raise ValueError(
                    f"`conditionals({i}, x)` (vectorized=True) gave ppf {new[k]} and cdf {f_old[k]} "
                    f"for chain {k} at x = {x[k]}; expected a finite value and a value in [0, 1]"
                )
        else:
            new, f_old = self._per_chain_values(x, i, u)
        # a draw on a declared bound would map to an infinite unconstrained value
        x[:, i] = np.minimum(np.maximum(new, np.nextafter(lo[i], np.inf)), np.nextafter(hi[i], -np.inf))
        return f_old

    def _per_chain_values(self, x, i, u):
        """``(ppf(u), cdf(x[:, i]))`` with ``conditionals`` called once per chain.

        When every chain's answer is a frozen scipy.stats distribution of one recognised
        family (``frozen.BATCHED_FAMILIES``), the ``ppf``/``cdf`` of all chains are one call of
        the family's vectorised methods with the chains' parameters stacked: the same
        numbers as one call per chain (elementwise arithmetic; the tests check it bit for
        bit) without scipy's per-call overhead.
        """
        dists = [self._user_conditional(i, k, x[k]) for k in range(len(x))]
        batch = frozen_batch(dists, u, x[:, i])
        if batch is not None and np.all(np.isfinite(batch[0])) and np.all(
                (batch[1] >= 0.0) & (batch[1] <= 1.0)):
            return batch
        # one chain at a time, which also names the chain that went wrong
        new, f_old = np.empty(len(x)), np.empty(len(x))
        for k, dist in enumerate(dists):
            new[k] = _scalar(dist.ppf, u[k], "ppf", i, k, x[k])
            f_old[k] = _scalar(dist.cdf, x[k, i], "cdf", i, k, x[k])
            if not np.isfinite(new[k]):
                raise ValueError(
                    f"`conditionals({i}, x).ppf({u[k]!r})` returned {new[k]} for chain {k} at "
                    f"x = {x[k]}; expected a finite value"
                )
            if not 0.0 <= f_old[k] <= 1.0:
                raise ValueError(
                    f"`conditionals({i}, x).cdf(x[{i}])` returned {f_old[k]} for chain {k} at "
                    f"x = {x[k]}; expected a value in [0, 1]"
                )
        return new, f_old

    def _user_conditional(self, i, k, x, context=None):
        """``conditionals(i, x)`` for chain ``k`` (or the ``context`` of a batched call), checked."""
        try:
            dist = self.conditionals(i, x.copy())
        except Exception as err:
            raise RuntimeError(
                f"`conditionals({i}, x)` raised {type(err).__name__}: {err} "
                f"(coordinate {i}, {context or f'chain {k}, x = {x}'})"
            ) from err
        if not (callable(getattr(dist, "cdf", None)) and callable(getattr(dist, "ppf", None))):
            raise TypeError(
                f"`conditionals({i}, x)` must return an object with cdf and ppf methods (a frozen "
                f"scipy.stats distribution works), got {type(dist).__name__} (coordinate {i})"
            )
        return dist

    # ------------------------------------------------------------- settings
    def settings(self):
        """JSON-friendly description; a user's ``conditionals`` is recorded by name only."""
        cond = self.conditionals
        name = None if cond is None else getattr(cond, "__qualname__", type(cond).__name__)
        out = {"kernel": "Gibbs", "shift": self.shift, "shared_stream": self.shared_stream,
               "grid_size": self.grid_size, "conditionals": name}
        if self.vectorized:  # only when set, so existing settings and reprs read as before
            out["vectorized"] = True
        return out

    @classmethod
    def from_settings(cls, settings, *, conditionals=None):
        """Rebuild a Gibbs kernel from ``settings()``.

        Parameters
        ----------
        settings : dict
            As returned by ``settings()`` (the ``"kernel"`` entry is optional).
        conditionals : callable, optional
            The user's conditionals, which settings cannot hold. When the settings
            name one and none is given, numeric conditionals are used with a
            warning (same target, different draws).

        Raises
        ------
        ValueError
            For unknown keys.
        """
        s = dict(settings)
        s.pop("kernel", None)
        recorded = s.pop("conditionals", None)
        unknown = sorted(set(s) - {"shift", "shared_stream", "grid_size", "vectorized"})
        if unknown:
            raise ValueError(f"`settings` has unknown Gibbs keys {unknown}")
        if recorded is not None and conditionals is None:
            warnings.warn(
                f"the settings name user conditionals ({recorded!r}) that cannot be stored; "
                "using numeric conditionals instead (same target, different draws). Pass "
                "conditionals=... to Gibbs.from_settings to restore them.",
                UserWarning, stacklevel=2,
            )
        return cls(conditionals, shift=s.get("shift"), shared_stream=s.get("shared_stream", False),
                   grid_size=s.get("grid_size", DEFAULT_GRID_SIZE), vectorized=s.get("vectorized", False))


def _scalar(method, arg, what, i, k, x):
    """``method(arg)`` of a user's conditional as a float, with context on failure."""
    try:
        v = np.asarray(method(arg), dtype=float)
    except Exception as err:
        raise RuntimeError(
            f"`conditionals({i}, x).{what}` raised {type(err).__name__}: {err} "
            f"(coordinate {i}, chain {k}, x = {x})"
        ) from err
    if v.size != 1:
        raise ValueError(
            f"`conditionals({i}, x).{what}` must return a scalar, got shape {v.shape} (coordinate {i})"
        )
    return float(v.reshape(()))
