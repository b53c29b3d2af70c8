"""Per-chain random streams spawned from one SeedSequence.

Every random number a kernel uses comes from here. Chain ``k`` always gets the
``k``-th child of the run's SeedSequence, so its draws do not depend on how many
other chains run beside it, and the same seed gives the same draws whether a
widget steps one transition at a time or ``sample`` runs a batch.
"""

import numbers

import numpy as np

__all__ = ["Streams", "seed_sequence"]


def seed_sequence(seed):
    """Normalise ``seed`` (None, int, SeedSequence or Generator) into a SeedSequence."""
    if isinstance(seed, np.random.SeedSequence):
        return seed
    if isinstance(seed, np.random.Generator):
        return np.random.SeedSequence(int(seed.integers(2**63)))
    if seed is None or (isinstance(seed, numbers.Integral) and not isinstance(seed, bool) and seed >= 0):
        return np.random.SeedSequence(seed)
    raise TypeError(
        f"`seed` must be None, a non-negative int, a numpy SeedSequence or Generator, got {seed!r}"
    )


class Streams:
    """Independent (or, with ``shared=True``, identical) random streams for a batch of chains.

    Draws are buffered per chain in blocks so that a batch of many chains costs
    one generator call per chain every few hundred transitions, not every
    transition; buffering does not change which numbers a chain sees.

    Parameters
    ----------
    seed : None, int, SeedSequence or Generator
    n_chains : int
    shared : bool
        Every chain consumes the same numbers (one stream broadcast to all).
    """

    def __init__(self, seed, n_chains, *, shared=False):
        self.seed_sequence = seed_sequence(seed)
        self.n_chains = int(n_chains)
        self.shared = bool(shared)
        n_gen = 1 if self.shared else self.n_chains
        children = self.seed_sequence.spawn(n_gen)
        # One generator per chain *and kind*: the block size below depends on n_chains,
        # and refills of one shared generator would interleave normals and uniforms
        # differently for different block sizes, so chain k's numbers would depend on
        # how many chains run beside it. A single-kind stream is the same however it
        # is chunked.
        kinds = [c.spawn(2) for c in children]
        self.generators = {
            kind: [np.random.Generator(np.random.PCG64(pair[i])) for pair in kinds]
            for i, kind in enumerate(("normal", "uniform"))
        }
        self._block = max(64, min(4096, 2_000_000 // max(n_gen, 1)))
        self._buf = {"normal": np.empty((n_gen, 0)), "uniform": np.empty((n_gen, 0))}
        self._pos = {"normal": 0, "uniform": 0}

    @property
    def entropy(self):
        """The SeedSequence entropy: pass it back as ``seed`` to reproduce the draws."""
        return self.seed_sequence.entropy

    def _take(self, kind, count):
        buf, pos = self._buf[kind], self._pos[kind]
        if pos + count > buf.shape[1]:
            size = max(self._block, count)
            if kind == "normal":
                fresh = np.stack([g.standard_normal(size) for g in self.generators[kind]])
            else:
                fresh = np.stack([g.random(size) for g in self.generators[kind]])
            buf = np.concatenate([buf[:, pos:], fresh], axis=1)
            self._buf[kind], pos = buf, 0
        out = buf[:, pos:pos + count]
        self._pos[kind] = pos + count
        if self.shared:
            out = np.broadcast_to(out, (self.n_chains, count))
        return out.copy()

    def normal(self, dim=None):
        """Standard normals shaped (n_chains,) or (n_chains, dim)."""
        if dim is None:
            return self._take("normal", 1)[:, 0]
        return self._take("normal", dim)

    def uniform(self, dim=None):
        """U(0, 1) draws shaped (n_chains,) or (n_chains, dim)."""
        if dim is None:
            return self._take("uniform", 1)[:, 0]
        return self._take("uniform", dim)
