"""Wrap a user's log-density so every sampler sees one counted, checked interface."""

import contextlib
import warnings
from dataclasses import dataclass

import numpy as np

from ._validate import as_points, check_callable, check_int, real_values

_FLOAT = np.dtype(float)

__all__ = ["Target", "GradientCheck"]

_FD_WARNING = (
    "no gradient was given, so phaseglass uses central finite differences "
    "(2*dim log-density evaluations per gradient, accurate to about 1e-7). Pass "
    "grad=f (f(x) returns shape (dim,)) or value_and_grad=f (returns (logp, grad)) "
    "to Target for speed and accuracy."
)


def _add_note(exc, note):
    if hasattr(exc, "add_note"):  # Python >= 3.11
        exc.add_note(note)


def _pair(out):
    """``(value, grad)`` from a ``value_and_grad`` result, or a clear error."""
    try:
        v, g = out
    except (TypeError, ValueError):
        raise TypeError(f"`value_and_grad` must return a pair (log_density, grad), got "
                        f"{type(out).__name__} {out!r:.60}") from None
    return v, g


def _infer_dim(dim, names, bounds):
    """``dim`` as given, else the length of ``names`` or ``bounds``, else a clear error."""
    if dim is None:
        if names is not None:
            dim = len(names)
        elif bounds is not None:
            dim = len(bounds)
        else:
            raise ValueError(
                "`dim` could not be inferred: pass dim=<number of parameters> "
                "(or names=[...] or bounds=[...] with one entry per parameter)"
            )
    return check_int("dim", dim, minimum=1)


def _sigmoid(z):
    return 0.5 * (1.0 + np.tanh(0.5 * z))


class _Bounds:
    """Standard unconstraining transforms, one per coordinate.

    One-sided bounds use ``x = lo + exp(z)`` (or ``hi - exp(z)``), two-sided bounds
    use ``x = lo + (hi - lo) * sigmoid(z)``; ``log_jacobian`` is log |dx/dz| summed
    over coordinates.
    """

    def __init__(self, bounds, dim):
        if len(bounds) != dim:
            raise ValueError(f"`bounds` must have one (lo, hi) pair per coordinate ({dim}), got {len(bounds)}")
        lo = np.full(dim, -np.inf)
        hi = np.full(dim, np.inf)
        for i, pair in enumerate(bounds):
            if pair is None:
                continue
            try:
                a, b = pair
            except (TypeError, ValueError):
                raise ValueError(f"`bounds[{i}]` must be a (lo, hi) pair or None, got {pair!r}") from None
            lo[i] = -np.inf if a is None else float(a)
            hi[i] = np.inf if b is None else float(b)
            if not lo[i] < hi[i]:
                raise ValueError(f"`bounds[{i}]` must have lo < hi, got {pair!r}")
        self.lo, self.hi = lo, hi
        self.lower_only = np.isfinite(lo) & ~np.isfinite(hi)
        self.upper_only = ~np.isfinite(lo) & np.isfinite(hi)
        self.both = np.isfinite(lo) & np.isfinite(hi)
        self.any = bool(np.any(self.lower_only | self.upper_only | self.both))

    def to_user(self, z):
        x = np.array(z, dtype=float, copy=True)
        with np.errstate(over="ignore"):
            if self.lower_only.any():
                x[..., self.lower_only] = self.lo[self.lower_only] + np.exp(z[..., self.lower_only])
            if self.upper_only.any():
                x[..., self.upper_only] = self.hi[self.upper_only] - np.exp(z[..., self.upper_only])
            if self.both.any():
                lo, hi = self.lo[self.both], self.hi[self.both]
                x[..., self.both] = lo + (hi - lo) * _sigmoid(z[..., self.both])
        return x

    def from_user(self, x):
        x = np.asarray(x, dtype=float)
        z = np.array(x, copy=True)
        with np.errstate(divide="ignore", invalid="ignore"):
            if self.lower_only.any():
                z[..., self.lower_only] = np.log(x[..., self.lower_only] - self.lo[self.lower_only])
            if self.upper_only.any():
                z[..., self.upper_only] = np.log(self.hi[self.upper_only] - x[..., self.upper_only])
            if self.both.any():
                lo, hi = self.lo[self.both], self.hi[self.both]
                t = (x[..., self.both] - lo) / (hi - lo)
                z[..., self.both] = np.log(t) - np.log1p(-t)
        return z

    def jacobian_terms(self, z):
        """Return (log|dx/dz| summed, dx/dz per coordinate, d log|dx/dz| / dz)."""
        logj = np.zeros(z.shape[:-1])
        dxdz = np.ones_like(z)
        dlogj = np.zeros_like(z)
        with np.errstate(over="ignore"):
            one = self.lower_only | self.upper_only
            if one.any():
                zz = z[..., one]
                logj = logj + zz.sum(axis=-1)
                sign = np.where(self.lower_only[one], 1.0, -1.0)
                dxdz[..., one] = sign * np.exp(zz)
                dlogj[..., one] = 1.0
            if self.both.any():
                zz = z[..., self.both]
                width = self.hi[self.both] - self.lo[self.both]
                s = _sigmoid(zz)
                # log(sigmoid) + log(1 - sigmoid) written stably
                logj = logj + (np.log(width) - np.logaddexp(0.0, -zz) - np.logaddexp(0.0, zz)).sum(axis=-1)
                dxdz[..., self.both] = width * s * (1.0 - s)
                dlogj[..., self.both] = 1.0 - 2.0 * s
        return logj, dxdz, dlogj


@dataclass(frozen=True)
class GradientCheck:
    """Comparison of a supplied gradient with central finite differences.

    Attributes
    ----------
    ok : bool
        True when every ``rel_error`` is below ``rtol``.
    max_rel_error : float
    rel_error : ndarray, shape (n_points, dim)
        ``|supplied - numeric| / (max(|supplied|, |numeric|) + atol)``.
    supplied, numeric : ndarray, shape (n_points, dim)
    points : ndarray, shape (n_points, dim)
    names : tuple of str
    rtol : float
    """

    ok: bool
    max_rel_error: float
    rel_error: np.ndarray
    supplied: np.ndarray
    numeric: np.ndarray
    points: np.ndarray
    names: tuple
    rtol: float

    def worst(self, k=3):
        """Return up to ``k`` (name, rel_error, supplied, numeric) rows, worst first."""
        per_coord = np.nanmax(self.rel_error, axis=0)
        order = np.argsort(-np.nan_to_num(per_coord, nan=np.inf))[:k]
        rows = []
        for i in order:
            j = int(np.nanargmax(np.nan_to_num(self.rel_error[:, i], nan=np.inf)))
            rows.append((self.names[i], float(per_coord[i]), float(self.supplied[j, i]), float(self.numeric[j, i])))
        return rows

    def __repr__(self):
        verdict = "gradient agrees with finite differences" if self.ok else "GRADIENT MISMATCH"
        lines = [
            f"GradientCheck({verdict}: max relative error {self.max_rel_error:.2e}, "
            f"tolerance {self.rtol:.0e}, {self.points.shape[0]} point(s))"
        ]
        for name, err, sup, num in self.worst():
            flag = "  <-- check this" if err > self.rtol else ""
            lines.append(f"  {name}: rel. error {err:.2e} (supplied {sup:.6g}, numeric {num:.6g}){flag}")
        return "\n".join(lines)


class Target:
    """A log-density the samplers can use: shapes checked, evaluations counted.

    Parameters
    ----------
    log_density : callable, optional
        ``log_density(x)`` with ``x`` shaped (dim,) returns a float; with
        ``vectorized=True`` it takes (n, dim) and returns (n,). May return -inf
        outside the support. May be left out when ``value_and_grad`` is given:
        the value part of that function is used (each such evaluation then also
        computes, and counts, a gradient).
    grad : callable, optional
        Gradient of ``log_density`` with the same calling convention, returning
        (dim,) or (n, dim). Without it (and without ``value_and_grad``) central
        finite differences are used, with a one-time warning.
    dim : int, optional
        Number of parameters; inferred from ``names`` or ``bounds`` when omitted.
    vectorized : bool
        Whether the functions accept a batch of points (n, dim).
    bounds : sequence of (lo, hi) or None, optional
        Per-coordinate support on the user's scale; ``None`` or infinite ends
        mean unbounded. Bounded coordinates are sampled on an unconstrained
        scale (log for one-sided, logit for two-sided bounds) with the
        log-Jacobian added; draws come back on the user's scale.
    names : sequence of str, optional
        Parameter names used in summaries and plots.
    value_and_grad : callable, optional
        A joint function returning ``(log_density, grad)``; used in place of
        two calls when given (many models share work between the two). Enough
        on its own: ``Target(value_and_grad=f, dim=3)``.

    See Also
    --------
    Target.from_jax : write only the log-density with ``jax.numpy``; the gradient
        comes from JAX.

    Notes
    -----
    ``log_density``, ``grad`` and ``value_and_grad`` methods work on the
    *sampler's* scale (unconstrained when ``bounds`` are given; identical to the
    user's scale otherwise). ``to_user`` and ``from_user`` convert. Every point
    evaluated is counted in ``n_density`` and ``n_grad``.

    Examples
    --------
    >>> import numpy as np, phaseglass as pg
    >>> t = pg.Target(lambda x: -0.5 * x @ x, lambda x: -x, dim=2)
    >>> t.value_and_grad(np.array([1.0, 2.0]))
    (-2.5, array([-1., -2.]))
    """

    def __init__(self, log_density=None, grad=None, *, dim=None, vectorized=False, bounds=None,
                 names=None, value_and_grad=None):
        if log_density is None and value_and_grad is None:
            raise TypeError("`log_density` is required (or `value_and_grad`, a joint function "
                            "returning (log_density, grad), in its place)")
        # None: the value comes from value_and_grad (see _call_logp)
        self._user_logp = None if log_density is None else check_callable("log_density", log_density)
        self._user_grad = None if grad is None else check_callable("grad", grad)
        self._user_vg = None if value_and_grad is None else check_callable("value_and_grad", value_and_grad)
        self.dim = _infer_dim(dim, names, bounds)
        self.gradient_source = None  # set by the from_* constructors ("JAX")
        self.vectorized = bool(vectorized)
        if names is None:
            names = [f"x[{i}]" for i in range(self.dim)]
        names = tuple(str(n) for n in names)
        if len(names) != self.dim:
            raise ValueError(f"`names` must have {self.dim} entries (one per coordinate), got {len(names)}")
        if len(set(names)) != len(names):
            raise ValueError(f"`names` must be unique, got {names}")
        self.names = names
        self._bounds = None if bounds is None else _Bounds(bounds, self.dim)
        if self._bounds is not None and not self._bounds.any:
            self._bounds = None
        self._checked = set()  # vectorized functions whose first batch was checked
        self.has_gradient = self._user_grad is not None or self._user_vg is not None
        if not self.has_gradient:
            warnings.warn(_FD_WARNING, UserWarning, stacklevel=2)
        self.reset_counts()

    # ----------------------------------------------------------- autodiff
    @classmethod
    def from_jax(cls, log_density, *, dim=None, bounds=None, names=None):
        """A Target whose gradient comes from JAX: write only the log-density.

        Parameters
        ----------
        log_density : callable
            Written with ``jax.numpy`` for ONE point ``x`` of shape (dim,), returning
            one real number (the log-density up to a constant). phaseglass
            differentiates it with ``jax.value_and_grad``, vectorises it over chains
            with ``jax.vmap`` and compiles it with ``jax.jit``.
        dim : int, optional
            Number of parameters; inferred from ``names`` or ``bounds`` when omitted.
        bounds, names
            As for ``Target``: bounds are on your scale, and the log-Jacobian of the
            unconstraining transform is added for you.

        Returns
        -------
        Target
            Vectorized, evaluations counted per point in ``n_density`` and
            ``n_grad``; ``check_gradient`` compares JAX's gradient with finite
            differences like any supplied gradient.

        Raises
        ------
        ImportError
            JAX is not installed (``pip install "phaseglass[jax]"``).
        ValueError
            ``log_density`` cannot be traced by JAX on one point of shape (dim,) or
            does not return one real number (checked here, before any sampling).

        Notes
        -----
        Everything is computed in float64, whatever your JAX settings: each call
        turns 64-bit floats on for its own duration and its own thread
        (``jax.enable_x64(True)`` as a context manager) and your own
        ``jax_enable_x64`` setting is untouched afterwards. Keep data your function
        closes over as NumPy float64 arrays: a ``jnp.array`` made while 64-bit
        floats are off is float32 and stays float32 inside the computation.

        JAX is imported only when this method is called; the rest of phaseglass
        never needs it. Each new batch size (number of chains, number of points in a
        check) is compiled once, on first use.

        Examples
        --------
        >>> import jax.numpy as jnp, phaseglass as pg              # doctest: +SKIP
        >>> def log_density(x):                                   # doctest: +SKIP
        ...     return -0.5 * (x[0] ** 2 / 4.0 + (x[1] - 0.5 * x[0] ** 2) ** 2)
        >>> target = pg.Target.from_jax(log_density, dim=2)       # doctest: +SKIP
        >>> run = pg.sample(target, pg.HMC(0.2, 10), n_draws=500, warmup=300)  # doctest: +SKIP
        """
        from .autodiff import jax_functions  # imports JAX: only here

        check_callable("log_density", log_density)
        dim = _infer_dim(dim, names, bounds)
        logp, vg = jax_functions(log_density, dim)
        target = cls(logp, dim=dim, vectorized=True, bounds=bounds, names=names, value_and_grad=vg)
        # The batch dimension is ours (vmap of a one-point function), so the check that a
        # function declared vectorized really treats rows as points cannot fail: skip it and
        # its extra compilation for a batch of one.
        target._checked.update({"log_density", "value_and_grad"})
        target.gradient_source = "JAX"
        return target

    # ------------------------------------------------------------------ counts
    def reset_counts(self):
        """Set ``n_density`` and ``n_grad`` back to zero."""
        self.n_density = 0
        self.n_grad = 0

    @contextlib.contextmanager
    def uncounted(self):
        """Evaluations inside this block are not counted (checks, previews, replays).

        ``n_density`` and ``n_grad`` are restored on exit, also when the block
        raises, so views and checks never inflate a run's cost.
        """
        counts = (self.n_density, self.n_grad)
        try:
            yield self
        finally:
            self.n_density, self.n_grad = counts

    # ------------------------------------------------------------ user scale
    @property
    def bounded(self):
        """Whether any coordinate is transformed."""
        return self._bounds is not None

    @property
    def bounds(self):
        """(lo, hi) arrays of shape (dim,) on the user's scale (infinite when unbounded)."""
        if self._bounds is None:
            return np.full(self.dim, -np.inf), np.full(self.dim, np.inf)
        return self._bounds.lo.copy(), self._bounds.hi.copy()

    def to_user(self, z):
        """Map points from the sampler's scale to the user's scale (any leading shape)."""
        z = np.asarray(z, dtype=float)
        return z.copy() if self._bounds is None else self._bounds.to_user(z)

    def from_user(self, x):
        """Map points from the user's scale to the sampler's scale (any leading shape)."""
        x = np.asarray(x, dtype=float)
        return x.copy() if self._bounds is None else self._bounds.from_user(x)

    # ------------------------------------------------------------ raw calls
    def _batch(self, which, fn, x):
        """Call a vectorized user function on a batch; the first batch is checked once.

        A function written for one point but declared ``vectorized=True`` reads
        ``x[0]`` as the first *point*, not the first coordinate. When the number
        of points happens to equal ``dim`` the shapes fit and the sampler would
        draw from the wrong distribution without any error, so the first batch
        of two or more points is compared with the same points passed one at a
        time (as batches of one row).
        """
        try:
            out = fn(x)
        except Exception as exc:
            if which not in self._checked:
                _add_note(exc, f"phaseglass: with vectorized=True, `{which}` receives a batch of "
                               f"shape (n, {self.dim}); if it was written for one point of shape "
                               f"({self.dim},), pass vectorized=False to Target")
            raise
        if which not in self._checked and x.shape[0] >= 2:
            self._checked.add(which)
            self._compare_rows(which, fn, x, out)
        return out

    def _compare_rows(self, which, fn, x, out):
        n = x.shape[0]
        want = {"log_density": [(n,)], "grad": [(n, self.dim)],
                "value_and_grad": [(n,), (n, self.dim)]}[which]
        parts = tuple(out) if which == "value_and_grad" and isinstance(out, (tuple, list)) else (out,)
        if [np.shape(p) for p in parts] != want:
            return  # a wrong shape: the caller's shape check names it
        hint = (f"pass vectorized=False if `{which}` was written for one point of shape "
                f"({self.dim},)")
        rows = range(min(x.shape[0], 3))
        for k in rows:
            # counted like any evaluation (every call of the user's function is counted)
            if which != "grad":
                self.n_density += 1
            if which != "log_density":
                self.n_grad += 1
            try:
                alone = fn(x[k:k + 1])
            except Exception as exc:
                raise ValueError(f"vectorized=True, but `{which}` fails on a batch of one point "
                                 f"({type(exc).__name__}: {exc}); {hint}") from exc
            pairs = zip(alone, out) if which == "value_and_grad" else [(alone, out)]
            for a, b in pairs:
                a = np.asarray(a, dtype=complex).reshape(-1)
                b = np.asarray(b, dtype=complex)
                b = b[k] if b.ndim else b
                b = np.reshape(b, -1)
                if a.shape != b.shape or not np.allclose(a, b, rtol=1e-9, atol=1e-12,
                                                         equal_nan=True):
                    raise ValueError(
                        f"vectorized=True, but `{which}` gives different results for point {k} "
                        f"of a batch of {x.shape[0]} ({np.round(b.real, 6).tolist()}) and for the "
                        f"same point alone ({np.round(a.real, 6).tolist()}); {hint}")

    def _call_logp(self, x):
        """User log-density on user-scale points (n, dim) -> (n,)."""
        if self._user_logp is None:  # only a joint function: it computes the gradient too
            return self._call_vg(x)[0]
        n = x.shape[0]
        self.n_density += n
        if self.vectorized:
            out = real_values("log_density", self._batch("log_density", self._user_logp, x))
            if out.shape != (n,):
                out = out.reshape(-1) if out.size == n else out
                if out.shape != (n,):
                    raise ValueError(
                        f"`log_density` (vectorized) must return shape ({n},) for input "
                        f"of shape {x.shape}, got shape {np.shape(out)}"
                    )
            return out
        out = np.empty(n)
        f = self._user_logp
        for k, point in enumerate(x):
            v = f(point)
            if type(v) is float or type(v) is np.float64:  # the common answer: nothing to check
                out[k] = v
            else:
                out[k] = self._logp_scalar(v)
        return out

    def _logp_scalar(self, value):
        """One point's log-density from a non-vectorized ``log_density``, checked: a float."""
        v = real_values("log_density", value)
        if v.size != 1:
            raise ValueError(
                f"`log_density` must return a scalar for input of shape ({self.dim},), "
                f"got shape {v.shape}; pass vectorized=True if it takes a batch"
            )
        return v.reshape(())

    def _check_grad_shape(self, g, n, single_call):
        want = (self.dim,) if single_call else (n, self.dim)
        if g.shape != want:
            raise ValueError(f"`grad` must return shape {want}, got shape {g.shape}")

    def _call_grad(self, x):
        n = x.shape[0]
        if self._user_grad is None and self._user_vg is None:
            return self._fd_grad(x)
        self.n_grad += n
        if self._user_grad is not None:
            if self.vectorized:
                g = real_values("grad", self._batch("grad", self._user_grad, x))
                self._check_grad_shape(g, n, False)
                return g
            rows = []
            for k in range(n):
                g = real_values("grad", self._user_grad(x[k]))
                self._check_grad_shape(g, 1, True)
                rows.append(g)
            return np.stack(rows)
        # only a joint function: the value comes for free, we just drop it
        self.n_grad -= n
        return self._call_vg(x)[1]

    def _call_vg(self, x):
        n = x.shape[0]
        if self._user_vg is None:
            return self._call_logp(x), self._call_grad(x)
        self.n_density += n
        self.n_grad += n
        if self.vectorized:
            v, g = _pair(self._batch("value_and_grad", self._user_vg, x))
            if (type(v) is np.ndarray and type(g) is np.ndarray and v.dtype == _FLOAT
                    and g.dtype == _FLOAT and v.shape == (n,) and g.shape == (n, self.dim)):
                return v, g  # the integrators' hot path: nothing to convert or check
            return self._vg_values(v, g, n)
        vals = np.empty(n)
        grads = np.empty((n, self.dim))
        for k in range(n):
            v, g = _pair(self._user_vg(x[k]))
            v = real_values("value_and_grad", v)
            if v.size != 1:
                raise ValueError(
                    f"`value_and_grad` must return a scalar log-density for input of shape "
                    f"({self.dim},), got shape {v.shape}; pass vectorized=True if it takes a batch")
            vals[k] = v.reshape(())
            g = real_values("value_and_grad", g)
            self._check_grad_shape(g, 1, True)
            grads[k] = g
        return vals, grads

    def _vg_values(self, v, g, n):
        """A vectorized ``value_and_grad``'s output as float arrays (n,) and (n, dim), checked."""
        v = real_values("value_and_grad", v).reshape(-1)
        g = real_values("value_and_grad", g)
        if v.shape != (n,):
            raise ValueError(f"`value_and_grad` must return values of shape ({n},), got {v.shape}")
        if g.shape != (n, self.dim):
            self._check_grad_shape(g, n, False)
        return v, g

    def _fd_grad(self, x):
        """Central differences of the user's log-density, one batched evaluation."""
        n, d = x.shape
        h = np.cbrt(np.finfo(float).eps) * np.maximum(1.0, np.abs(x))  # (n, d)
        eye = np.eye(d)
        plus = x[:, None, :] + h[:, :, None] * eye[None]
        minus = x[:, None, :] - h[:, :, None] * eye[None]
        pts = np.concatenate([plus, minus], axis=1).reshape(n * 2 * d, d)
        vals = self._call_logp(pts).reshape(n, 2, d)
        self.n_grad += n
        with np.errstate(all="ignore"):
            return (vals[:, 0, :] - vals[:, 1, :]) / (2.0 * h)

    # --------------------------------------------------------- sampler scale
    def _with_jacobian(self, z, logp, grad_x):
        logj, dxdz, dlogj = self._bounds.jacobian_terms(z)
        logp = logp + logj
        if grad_x is None:
            return logp, None
        with np.errstate(all="ignore"):
            return logp, grad_x * dxdz + dlogj

    def log_density(self, z):
        """Log-density on the sampler's scale at (dim,) -> float or (n, dim) -> (n,)."""
        pts, single = as_points("x", z, self.dim)
        x = pts if self._bounds is None else self._bounds.to_user(pts)
        v = self._call_logp(x)
        if self._bounds is not None:
            v, _ = self._with_jacobian(pts, v, None)
        return float(v[0]) if single else v

    def grad(self, z):
        """Gradient on the sampler's scale at (dim,) -> (dim,) or (n, dim) -> (n, dim)."""
        return self.value_and_grad(z)[1] if self._bounds is not None else self._grad_plain(z)

    def _grad_plain(self, z):
        pts, single = as_points("x", z, self.dim)
        g = self._call_grad(pts)
        return g[0] if single else g

    def value_and_grad(self, z):
        """Return ``(log_density, grad)`` on the sampler's scale; shapes as in the two methods."""
        pts, single = as_points("x", z, self.dim)
        v, g = self._value_and_grad_rows(pts)
        return (float(v[0]), g[0]) if single else (v, g)

    def _value_and_grad_rows(self, pts):
        """Fast path for the integrators: (n, dim) float array in, no shape juggling."""
        if self._bounds is None:
            return self._call_vg(pts)
        x = self._bounds.to_user(pts)
        v, gx = self._call_vg(x)
        return self._with_jacobian(pts, v, gx)

    # -------------------------------------------------------------- checks
    def check_gradient(self, x, *, rtol=1e-4, atol=1e-6):
        """Compare the supplied gradient with central finite differences.

        Parameters
        ----------
        x : array_like, shape (dim,) or (n_points, dim)
            Point(s) on the user's scale.
        rtol : float
            Relative error above which a coordinate is reported as wrong.
        atol : float
            Added to the denominator so coordinates whose gradient is ~0 do not
            report noise as error.

        Returns
        -------
        GradientCheck
            ``ok``, ``max_rel_error``, per-coordinate ``rel_error`` of shape
            (n_points, dim); its repr names the worst coordinates.
        """
        if not self.has_gradient:
            raise ValueError(
                "`check_gradient` needs a supplied gradient: this Target uses finite differences "
                "already; pass grad=... or value_and_grad=... to Target"
            )
        pts, _ = as_points("x", x, self.dim)
        with self.uncounted():  # a check is not sampling work
            if self._user_grad is not None:
                supplied = self._call_grad(pts)
            else:
                supplied = self._call_vg(pts)[1]
            numeric = self._fd_grad(pts)
        with np.errstate(all="ignore"):
            rel = np.abs(supplied - numeric) / (np.maximum(np.abs(supplied), np.abs(numeric)) + atol)
        rel = np.where(np.isfinite(supplied) & np.isfinite(numeric), rel, np.inf)
        max_rel = float(np.max(rel))
        return GradientCheck(
            ok=bool(max_rel <= rtol), max_rel_error=max_rel, rel_error=rel, supplied=supplied,
            numeric=numeric, points=pts, names=self.names, rtol=float(rtol),
        )

    def __repr__(self):
        if self.gradient_source is not None:
            grad = f"gradient from {self.gradient_source}"
        else:
            grad = "analytic gradient" if self.has_gradient else "finite-difference gradient"
        b = ", bounded" if self.bounded else ""
        return f"Target(dim={self.dim}, {grad}{', vectorized' if self.vectorized else ''}{b})"
