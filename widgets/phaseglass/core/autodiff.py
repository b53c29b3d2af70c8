"""Gradients from an autodiff library: the user writes the log-density, JAX derives the rest.

Nothing here imports JAX when the module is imported: ``Target.from_jax`` imports it
when called, so ``import phaseglass`` stays light and works without JAX installed.
JAX is an optional extra (``pip install "phaseglass[jax]"``).
"""

import numpy as np

__all__ = ["jax_functions"]

_MISSING_JAX = (
    "`Target.from_jax` needs JAX, an optional extra of phaseglass: "
    "pip install \"phaseglass[jax]\" (or pip install jax)"
)


def _import_jax():
    try:
        import jax
        import jax.numpy as jnp
    except ImportError as exc:
        raise ImportError(_MISSING_JAX) from exc
    return jax, jnp


def _x64_scope(jax):
    """A context-manager factory that turns on 64-bit floats for the current thread only.

    On exit the user's own setting (``jax_enable_x64``, global or scoped) is back as
    it was. ``jax.enable_x64(True)`` is the thread-local scope of JAX >= 0.8;
    earlier releases offer the same as ``jax.experimental.enable_x64()``.
    """
    state = getattr(jax, "enable_x64", None)
    if state is not None:
        return lambda: state(True)
    from jax.experimental import enable_x64  # JAX < 0.8

    return enable_x64


def _first_line(exc):
    text = str(exc).strip().splitlines()
    return text[0] if text else ""


def jax_functions(log_density, dim):
    """Batched, jit-compiled float64 functions built from a one-point JAX log-density.

    Parameters
    ----------
    log_density : callable
        Written with ``jax.numpy`` for one point of shape (dim,), returning a scalar.
    dim : int

    Returns
    -------
    log_density_batch, value_and_grad_batch : callable
        ``(n, dim)`` NumPy array -> ``(n,)``, and -> ``((n,), (n, dim))``, float64
        NumPy arrays. Each call turns 64-bit floats on for its own duration only.

    Raises
    ------
    ImportError
        JAX is not installed.
    ValueError
        ``log_density`` cannot be traced on one float64 point, or does not return one
        real number.
    """
    jax, jnp = _import_jax()
    x64 = _x64_scope(jax)
    hint = (f"Target.from_jax expects `log_density` written with jax.numpy for one point of "
            f"shape ({dim},), returning one real number; no numpy calls on `x`, and jnp.where "
            f"instead of `if` on its values")
    # Trace once, without computing, so a mistake shows now and names the argument.
    with x64():
        try:
            out = jax.eval_shape(log_density, jax.ShapeDtypeStruct((dim,), jnp.float64))
        except Exception as exc:
            raise ValueError(
                f"`log_density` failed when JAX traced it on one point of shape ({dim},), "
                f"float64: {type(exc).__name__}: {_first_line(exc)} ({hint})") from exc
    shape = getattr(out, "shape", None)
    dtype = getattr(out, "dtype", None)
    if shape is None or dtype is None:
        what = f"a {type(out).__name__} of {len(out)}" if isinstance(out, (tuple, list, dict)) \
            else type(out).__name__
        raise ValueError(f"`log_density` must return one real number for one point of shape "
                         f"({dim},), got {what} ({hint})")
    if int(np.prod(shape)) != 1:
        raise ValueError(f"`log_density` must return one real number for one point of shape "
                         f"({dim},), got shape {tuple(shape)} ({hint})")
    if not jnp.issubdtype(dtype, jnp.floating):
        raise ValueError(f"`log_density` must return a real floating-point number, got dtype "
                         f"{dtype} ({hint})")

    if tuple(shape) == ():
        scalar = log_density
    else:
        def scalar(x):
            return jnp.reshape(log_density(x), ())

    vg_rows = jax.vmap(jax.value_and_grad(scalar))

    def packed(x):
        # one (n, 1 + dim) array: a single transfer back to NumPy per call instead of two
        # (saved ~10 us per call on the CPU with JAX 0.10.2 when the machine was quiet)
        v, g = vg_rows(x)
        return jnp.concatenate([v[:, None], g], axis=1)

    logp_batch = jax.jit(jax.vmap(scalar))
    vg_batch = jax.jit(packed)

    def log_density_batch(x):
        with x64():
            return np.array(logp_batch(np.asarray(x, dtype=np.float64)), dtype=np.float64)

    def value_and_grad_batch(x):
        with x64():
            # a copy: JAX hands out read-only buffers, the samplers may write into theirs
            out = np.array(vg_batch(np.asarray(x, dtype=np.float64)), dtype=np.float64)
        return out[:, 0], out[:, 1:]

    return log_density_batch, value_and_grad_batch
