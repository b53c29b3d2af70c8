"""The mass matrix (metric) used by kinetic energy, momentum draws and leapfrog."""

import numpy as np

__all__ = ["Metric"]


class Metric:
    """Inverse mass matrix: identity, diagonal or dense.

    Parameters
    ----------
    inverse_mass : None, array_like shape (dim,) or (dim, dim)
        ``None`` is the identity (of any dimension); a 1-D array is a diagonal
        inverse mass (roughly the posterior variances); a 2-D array is a dense
        inverse mass (roughly the posterior covariance), which must be symmetric
        positive-definite and is factorised once.

    Notes
    -----
    Kinetic energy is ``0.5 * p @ inverse_mass @ p``; momenta are drawn from
    N(0, M) with ``M = inverse(inverse_mass)``.

    Examples
    --------
    >>> import numpy as np, phaseglass as pg
    >>> m = pg.Metric(np.array([4.0, 1.0]))
    >>> float(m.kinetic(np.array([2.0, 1.0])))
    8.5
    """

    def __init__(self, inverse_mass=None):
        if inverse_mass is None:
            self.kind = "identity"
            self.inverse_mass = None
            self.dim = None
            return
        arr = np.asarray(inverse_mass, dtype=float)
        if arr.ndim == 1:
            if arr.size == 0 or not np.all(np.isfinite(arr)) or np.any(arr <= 0):
                raise ValueError(
                    "`inverse_mass` (diagonal) must be finite and > 0 everywhere, "
                    f"got {arr if arr.size < 8 else arr[:8]}"
                )
            self.kind = "diagonal"
            self.inverse_mass = arr.copy()
            self._sqrt_mass = 1.0 / np.sqrt(arr)  # momentum scale: sqrt of the mass
        elif arr.ndim == 2:
            if arr.shape[0] != arr.shape[1]:
                raise ValueError(f"`inverse_mass` (dense) must be square, got shape {arr.shape}")
            if not np.all(np.isfinite(arr)):
                raise ValueError("`inverse_mass` (dense) must be finite")
            if not np.allclose(arr, arr.T, rtol=1e-10, atol=1e-12 * np.abs(arr).max()):
                raise ValueError("`inverse_mass` (dense) must be symmetric; pass (A + A.T) / 2")
            try:
                chol = np.linalg.cholesky(arr)
            except np.linalg.LinAlgError:
                raise ValueError(
                    "`inverse_mass` (dense) must be positive-definite (Cholesky failed); "
                    "add a small multiple of the identity"
                ) from None
            self.kind = "dense"
            self.inverse_mass = arr.copy()
            self._chol = chol
            # inverse_mass = C C^T, mass = C^-T C^-1, so p = C^-T z has covariance M.
            self._chol_inv = np.linalg.inv(chol)
        else:
            raise ValueError(
                f"`inverse_mass` must be None, 1-D (diagonal) or 2-D (dense), got shape {arr.shape}"
            )
        self.dim = arr.shape[0]

    def check_dim(self, dim, name="metric"):
        """Raise ValueError when the metric does not fit a target of ``dim`` coordinates."""
        if self.dim is not None and self.dim != dim:
            raise ValueError(f"`{name}` has dimension {self.dim} but the target has dim={dim}")

    def velocity(self, p):
        """Return ``M^-1 p`` for momenta of shape (..., dim)."""
        if self.kind == "identity":
            return p
        if self.kind == "diagonal":
            return p * self.inverse_mass
        return p @ self.inverse_mass  # symmetric, so row-vector form is fine

    def kinetic(self, p):
        """Kinetic energy ``0.5 p^T M^-1 p`` for momenta (..., dim) -> (...)."""
        return 0.5 * np.add.reduce(p * self.velocity(p), axis=-1)  # = np.sum, without its wrapper

    def momentum_from_normal(self, z):
        """Turn standard normals (..., dim) into momenta distributed N(0, M)."""
        if self.kind == "identity":
            return z
        if self.kind == "diagonal":
            return z * self._sqrt_mass
        return z @ self._chol_inv  # row form of C^-T z

    def spread_from_normal(self, z):
        """Turn standard normals (..., dim) into draws from N(0, inverse_mass).

        Random-walk proposals use this: the inverse mass plays the role of the
        proposal covariance (up to the scale knob).
        """
        if self.kind == "identity":
            return z
        if self.kind == "diagonal":
            return z * np.sqrt(self.inverse_mass)
        return z @ self._chol.T

    def scaled(self, factor):
        """Return a new Metric whose inverse mass is multiplied by ``factor`` (scalar or (dim,))."""
        factor = np.asarray(factor, dtype=float)
        if self.kind == "identity":
            if factor.ndim == 0:
                raise ValueError("`factor` must be an array of shape (dim,) to scale an identity metric")
            return Metric(factor.copy())
        if self.kind == "diagonal":
            return Metric(self.inverse_mass * factor)
        s = np.sqrt(factor) * np.ones(self.dim)
        return Metric(self.inverse_mass * np.outer(s, s))

    def as_dict(self):
        """JSON-friendly description (for settings files and reports)."""
        inv = None if self.inverse_mass is None else self.inverse_mass.tolist()
        return {"kind": self.kind, "inverse_mass": inv}

    def __repr__(self):
        if self.kind == "identity":
            return "Metric(identity)"
        if self.kind == "diagonal":
            return f"Metric(diagonal, dim={self.dim})"
        return f"Metric(dense, dim={self.dim})"


def as_metric(metric, dim=None):
    """Normalise ``None``, an array or a Metric into a Metric (checked against ``dim``)."""
    if metric is None:
        m = Metric()
    elif isinstance(metric, Metric):
        m = metric
    else:
        m = Metric(metric)
    if dim is not None:
        m.check_dim(dim)
    return m
