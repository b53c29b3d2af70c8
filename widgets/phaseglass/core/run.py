"""``Run``: the record of a sampling run, and its per-parameter digest."""

import textwrap

import numpy as np

from . import diagnostics as dg
from .diagnostics import EBFMI_WARNING_LEVEL as EBFMI_LIMIT
from .diagnostics import RHAT_WARNING_LEVEL as RHAT_LIMIT

__all__ = ["Run", "Digest", "CAUTION"]

_TEXT_WIDTH = 92  # characters per line of printed summaries

#: Shown wherever diagnostics are presented.
CAUTION = (
    "Diagnostics can reveal problems but never prove convergence: a clean table "
    "means no problem was detected, not that the chains have found the whole posterior."
)

# Low-ESS threshold for plain-word warnings (common practice).
ESS_PER_CHAIN_LIMIT = 100  # total ESS below 100 * chains is reported as low

_STANDARD = ("accepted", "accept_prob", "energy", "energy_error", "divergent", "n_grad", "u",
             "step_size")


class Run:
    """Everything recorded by a sampling run.

    Attributes
    ----------
    draws : ndarray, shape (chain, draw, dim)
        On the user's scale.
    unconstrained : ndarray, shape (chain, draw, dim)
        The same draws on the sampler's scale (equal to ``draws`` without bounds).
    accepted, divergent : ndarray of bool, shape (chain, draw)
    accept_prob, energy, energy_error, step_size : ndarray of float, shape (chain, draw)
    n_grad : ndarray of int, shape (chain, draw)
        Gradient evaluations used by each transition.
    u : ndarray, shape (chain, draw) or (chain, draw, dim) for Gibbs
        The accept/reject (or driving) uniform used.
    extras : dict of ndarray
        Kernel-specific records (``reversed`` for PartialRefreshHMC, ...).
    kernel : Kernel
        The kernel as it stood at the end (tuned, after warm-up).
    seed : int
        SeedSequence entropy; pass it as ``seed`` to reproduce the run.
    trajectories : list of Trajectory or None
        Batch trajectories per transition when kept.
    divergences : list of (chain, draw, Trajectory)
        Replays of divergent transitions.
    names : tuple of str
    first_draw : int
        Index of the first kept draw (non-zero when a ring buffer dropped old ones).
    stopped : str or None
        Why the run ended before its planned length (an interrupt or an error in
        the user's code), or None for a complete run.
    """

    def __init__(self, draws, unconstrained, records, extras, *, target=None, kernel=None,
                 seed=None, trajectories=None, divergences=(), first_draw=0, names=None):
        self.draws = draws
        self.unconstrained = unconstrained
        for k in _STANDARD:
            setattr(self, k, records.get(k))
        self.extras = extras
        self.target = target
        self.kernel = kernel
        self.seed = seed
        self.trajectories = trajectories
        self.divergences = list(divergences)
        self.first_draw = first_draw
        self.names = tuple(names) if names is not None else tuple(f"x[{i}]" for i in range(draws.shape[-1]))
        self.n_warmup = 0
        self.warmup_auto = False  # True when sample() chose the warm-up length itself
        self.warmup_history = None
        self.stopped = None  # why a run ended early ("interrupted", an error), else None

    @classmethod
    def from_records(cls, fields, *, target, kernel, seed, trajectories, divergences, first_draw,
                     n_chains):
        dim = target.dim
        if "position" in fields:
            z = fields.pop("position")
        else:
            z = np.empty((n_chains, 0, dim))
        records = {k: fields.pop(k) for k in _STANDARD if k in fields}
        for k in _STANDARD:
            records.setdefault(k, np.empty((n_chains, z.shape[1])))
        if getattr(kernel, "u_per_coordinate", False) and records["u"].ndim == 2:
            records["u"] = np.empty((n_chains, z.shape[1], dim))  # no draws yet
        return cls(target.to_user(z), z, records, fields, target=target, kernel=kernel, seed=seed,
                   trajectories=trajectories, divergences=divergences, first_draw=first_draw,
                   names=target.names)

    # ------------------------------------------------------------ shapes
    @property
    def n_chains(self):
        return self.draws.shape[0]

    @property
    def n_draws(self):
        return self.draws.shape[1]

    @property
    def dim(self):
        return self.draws.shape[2]

    @property
    def n_divergent(self):
        return int(np.sum(self.divergent)) if self.divergent is not None else 0

    @property
    def total_grad(self):
        return int(np.sum(self.n_grad)) if self.n_grad is not None else 0

    def __repr__(self):
        kname = type(self.kernel).__name__ if self.kernel is not None else "?"
        if self.n_warmup:
            warm = (f" after {self.n_warmup} warm-up"
                    f"{' (automatic length; warmup=0 switches it off)' if self.warmup_auto else ''}")
        else:
            warm = ", no warm-up"
        return (f"Run({kname}: {self.n_chains} chains x {self.n_draws} draws{warm}, dim={self.dim}, "
                f"acceptance {np.mean(self.accepted) if self.n_draws else float('nan'):.2f}, "
                f"{self.n_divergent} divergent, {self.total_grad} gradient evaluations"
                f"{'; stopped early: ' + self.stopped if self.stopped else ''})")

    # ------------------------------------------------------------ digest
    def summary(self, probs=(0.05, 0.95)):
        """Per-parameter digest: location, spread, quantiles, ESS, R-hat, MCSE, warnings.

        Returns
        -------
        Digest
            Printable, and ``.as_dict()`` for JSON.
        """
        return Digest.from_run(self, probs)


class Digest:
    """Per-parameter table and run-level checks; see ``Run.summary``.

    Columns (ours): ``mean``, ``sd``, ``q5``, ``q95``, ``ess_centre`` (bulk ESS),
    ``ess_tails`` (tail ESS), ``rhat_rank`` (rank-normalised split R-hat),
    ``mcse_mean``.

    With more than ``MANY`` (12) parameters the printed summary (text and HTML)
    first lists the five worst-mixing ones (see ``worst_mixing``) under a
    heading; the full table follows.
    """

    columns = ("mean", "sd", "q5", "q95", "ess_centre", "ess_tails", "rhat_rank", "mcse_mean")

    #: Above this many parameters the printed summary lists the worst-mixing ones first.
    MANY = 12

    def __init__(self, names, table, run_info, warnings):
        self.names = tuple(names)
        self.table = table  # dict column -> ndarray (dim,)
        self.run_info = run_info
        self.warnings = list(warnings)

    @classmethod
    def from_run(cls, run, probs=(0.05, 0.95)):

        x = run.draws
        table = {
            "mean": x.mean(axis=(0, 1)),
            "sd": x.std(axis=(0, 1), ddof=1) if x.shape[0] * x.shape[1] > 1 else np.full(x.shape[2], np.nan),
            "q5": np.quantile(x, probs[0], axis=(0, 1)),
            "q95": np.quantile(x, probs[1], axis=(0, 1)),
        }
        enough = x.shape[1] >= 8
        nan = np.full(x.shape[2], np.nan)
        table["ess_centre"] = dg.ess(x, method="bulk") if enough else nan
        table["ess_tails"] = dg.ess(x, method="tail") if enough else nan
        table["rhat_rank"] = dg.rhat(x) if enough and x.shape[1] >= 8 else nan
        table["mcse_mean"] = dg.mcse(x, kind="mean") if enough else nan
        grads = run.total_grad
        # E-BFMI measures how well a *fresh* momentum draw moves between energy levels;
        # with persistent momentum (partial refresh, persistence > 0) it does not apply.
        energy_ok = (run.energy is not None and run.n_draws >= 8
                     and np.all(np.isfinite(run.energy)) and run.kernel is not None
                     and getattr(run.kernel, "uses_gradient", False)
                     and getattr(run.kernel, "persistence", 0.0) == 0.0)
        bfmi = dg.ebfmi(run.energy) if energy_ok else np.full(run.n_chains, np.nan)
        bfmi = np.atleast_1d(bfmi)
        min_ess = float(np.nanmin(table["ess_centre"])) if np.any(np.isfinite(table["ess_centre"])) else np.nan
        info = {
            "chains": run.n_chains,
            "draws_per_chain": run.n_draws,
            "warmup": run.n_warmup,
            "acceptance": float(np.mean(run.accepted)) if run.n_draws else np.nan,
            "divergences": run.n_divergent,
            "gradient_evaluations": grads,
            "min_ess_centre": min_ess,
            "ess_per_gradient": min_ess / grads if grads else np.nan,
            "ebfmi": bfmi.tolist(),
            "kernel": None if run.kernel is None else run.kernel.settings(),
            "seed": None if run.seed is None else int(run.seed) if np.ndim(run.seed) == 0 else run.seed,
        }
        warnings = []
        if run.n_divergent:
            warnings.append(
                f"{run.n_divergent} divergent transition(s) ({run.n_divergent / max(x.shape[0] * x.shape[1], 1):.1%}): "
                "the sampler could not follow the posterior's geometry somewhere; estimates may be biased. "
                "Try a smaller step size, a better metric or a reparameterisation (e.g. non-centred)."
            )
        low = [f"chain {i} ({b:.2f})" for i, b in enumerate(bfmi) if np.isfinite(b) and b < EBFMI_LIMIT]
        if low:
            warnings.append(
                f"E-BFMI below {EBFMI_LIMIT} in {', '.join(low)}: momentum resampling explores the "
                "energy levels poorly (heavy tails or a badly scaled metric)."
            )
        bad_rhat = [n for n, r in zip(run.names, table["rhat_rank"]) if np.isfinite(r) and r > RHAT_LIMIT]
        if bad_rhat:
            warnings.append(
                f"R-hat above {RHAT_LIMIT} for {', '.join(bad_rhat)}: the chains disagree; run longer "
                "or look for multimodality or stuck chains."
            )
        limit = ESS_PER_CHAIN_LIMIT * run.n_chains
        low_ess = [n for n, e in zip(run.names, np.minimum(table["ess_centre"], table["ess_tails"]))
                   if np.isfinite(e) and e < limit]
        if low_ess:
            warnings.append(
                f"ESS below {limit} ({ESS_PER_CHAIN_LIMIT} per chain) for {', '.join(low_ess)}: "
                "estimates are noisy; run longer or improve the sampler's settings."
            )
        cap = dg.ess_upper_bound(run.n_chains, 2 * (run.n_draws // 2))
        capped = [n for n, e in zip(run.names, table["ess_centre"])
                  if np.isfinite(e) and np.isfinite(cap) and e >= 0.999 * cap]
        info["ess_at_upper_bound"] = capped
        if capped:
            warnings.append(
                f"bulk ESS of {', '.join(capped)} sits at the estimator's upper bound "
                f"(S log10 S = {cap:.0f} for S = {run.n_chains * run.n_draws} draws): the chains are "
                "strongly antithetic there and the number is a cap, not a measured value."
            )
        return cls(run.names, table, info, warnings)

    def as_dict(self):
        """JSON-friendly dict: parameters, run-level figures, warnings and the caution."""
        params = {
            name: {c: _jsonable(self.table[c][i]) for c in self.columns}
            for i, name in enumerate(self.names)
        }
        return {
            "parameters": params,
            "run": {k: _jsonable(v) for k, v in self.run_info.items()},
            "warnings": list(self.warnings),
            "caution": CAUTION,
        }

    def __getitem__(self, column):
        return self.table[column]

    def worst_mixing(self, k=5):
        """Indices of the ``k`` worst-mixing parameters, worst first.

        A parameter's ESS rank orders ``min(ess_centre, ess_tails)`` from the
        lowest, its R-hat rank orders ``rhat_rank`` from the highest; it counts
        as bad as the better (smaller) of its two ranks, ties broken by the
        other rank. Parameters whose ESS and R-hat are both NaN come last.
        Returns an ndarray of int of shape (min(k, dim),); names are
        ``[digest.names[i] for i in ...]``.
        """
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
            raise ValueError(f"`k` must be a positive integer, got {k!r}")
        dim = len(self.names)
        ess = np.fmin(self.table["ess_centre"], self.table["ess_tails"])
        rhat = np.asarray(self.table["rhat_rank"], dtype=float)
        # NaN sorts last in both orders
        r_ess = np.empty(dim, dtype=int)
        r_ess[np.argsort(np.where(np.isfinite(ess), ess, np.inf), kind="stable")] = np.arange(dim)
        r_rhat = np.empty(dim, dtype=int)
        r_rhat[np.argsort(np.where(np.isfinite(rhat), -rhat, np.inf), kind="stable")] = np.arange(dim)
        order = np.lexsort((np.maximum(r_ess, r_rhat), np.minimum(r_ess, r_rhat)))
        return order[:min(int(k), dim)]

    def _text_rows(self, indices, width):
        rows = []
        for i in indices:
            cells = []
            for c in self.columns:
                v = self.table[c][i]
                cells.append(f"{v:>10.0f}" if c.startswith("ess") and np.isfinite(v) else f"{v:>10.4g}")
            rows.append(f"{self.names[i]:<{width}} " + " ".join(cells))
        return rows

    def __str__(self):
        width = max([len(n) for n in self.names] + [8])
        head = f"{'':<{width}} " + " ".join(f"{c:>10}" for c in self.columns)
        rows = []
        if len(self.names) > self.MANY:
            rows.append("Worst-mixing parameters (lowest ESS, highest R-hat):")
            rows.append(head)
            rows.extend(self._text_rows(self.worst_mixing(5), width))
            rows.append("")
            rows.append(f"All {len(self.names)} parameters:")
        rows.append(head)
        rows.extend(self._text_rows(range(len(self.names)), width))
        ri = self.run_info
        rows.append("")
        rows.extend(textwrap.wrap(
            f"{ri['chains']} chains x {ri['draws_per_chain']} draws, acceptance {ri['acceptance']:.3f}, "
            f"{ri['divergences']} divergent, {ri['gradient_evaluations']} gradient evaluations, "
            f"ESS per gradient {ri['ess_per_gradient']:.3g}", _TEXT_WIDTH))
        bf = ", ".join("nan" if not np.isfinite(b) else f"{b:.2f}" for b in ri["ebfmi"])
        rows.append(f"E-BFMI per chain: {bf}")
        if self.warnings:
            rows.append("Warnings:")
            for w in self.warnings:  # wrapped: a notebook's output column is ~95 characters
                rows.extend(textwrap.wrap(w, _TEXT_WIDTH, initial_indent="  - ",
                                          subsequent_indent="    "))
        else:
            rows.append("No problem detected by these checks.")
        rows.extend(textwrap.wrap(CAUTION, _TEXT_WIDTH))
        return "\n".join(rows)

    def __repr__(self):
        return str(self)

    def _repr_html_(self):
        import html

        head = "".join(f"<th>{c}</th>" for c in ("parameter",) + self.columns)

        def body(indices):
            out = []
            for i in indices:
                cells = "".join(f"<td>{self.table[c][i]:.4g}</td>" for c in self.columns)
                out.append(f"<tr><td>{html.escape(self.names[i])}</td>{cells}</tr>")
            return "".join(out)

        first = ""
        if len(self.names) > self.MANY:
            first = (f"<p>Worst-mixing parameters (lowest ESS, highest R-hat):</p>"
                     f"<table><tr>{head}</tr>{body(self.worst_mixing(5))}</table>"
                     f"<p>All {len(self.names)} parameters:</p>")
        warn = "".join(f"<li>{html.escape(w)}</li>" for w in self.warnings) or "<li>No problem detected by these checks.</li>"
        return (f"{first}<table><tr>{head}</tr>{body(range(len(self.names)))}</table><ul>{warn}</ul>"
                f"<p><em>{html.escape(CAUTION)}</em></p>")


def _jsonable(v):
    if isinstance(v, dict):
        return {k: _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if isinstance(v, (np.floating, float)):
        return float(v) if np.isfinite(v) else None
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, np.ndarray):
        return _jsonable(v.tolist())
    return v
