"""``Run``: the record of a sampling run, and its per-parameter digest."""

import textwrap
from dataclasses import dataclass

import numpy as np

from . import diagnostics as dg
from .diagnostics import EBFMI_WARNING_LEVEL as EBFMI_LIMIT
from .diagnostics import RHAT_WARNING_LEVEL as RHAT_LIMIT
from .efficiency import MIN_ESS_DRAWS, ess_per_gradient

__all__ = ["Run", "Digest", "Column", "COLUMNS", "CAUTION"]

_TEXT_WIDTH = 92  # characters per line of printed summaries

#: Shown wherever diagnostics are presented.
CAUTION = (
    "Diagnostics can reveal problems but never prove convergence: a clean table "
    "means no problem was detected, not that the chains have found the whole posterior."
)

# Low-ESS threshold for plain-word warnings: total bulk or tail ESS below 100 per chain,
# the level Vehtari et al. (2021, "Rank-normalization, folding, and localization",
# Bayesian Analysis 16(2)) recommend reaching before trusting the estimates.
ESS_PER_CHAIN_LIMIT = 100

_STANDARD = ("accepted", "accept_prob", "energy", "energy_error", "divergent", "n_grad", "u",
             "step_size")
# dtypes of the standard records a Sampler keeps (float for the others), for a Run with no draws
_EMPTY_DTYPES = {"accepted": bool, "divergent": bool, "n_grad": np.int32}


#: Share of transitions stopped by the tree-depth limit above which a NUTS run is warned about.
DEPTH_LIMIT_SHARE = 0.10
_ACCEPTANCE_WORDS = {False: "acceptance", True: "mean acceptance statistic"}


def _uses_trees(run):
    return (run.kernel is not None and hasattr(run.kernel, "max_depth")
            and "depth_limit_hit" in (run.extras or {}))


def _acceptance(run):
    """(value, words): NUTS's mean acceptance statistic, else the share of moved transitions.

    A NUTS transition almost always moves (it draws from the whole tree), so the
    share of moves says nothing; the acceptance statistic is what warm-up steers.
    """
    if not run.n_draws:
        return float("nan"), _ACCEPTANCE_WORDS[False]
    if _uses_trees(run) and run.accept_prob is not None:
        return float(np.mean(run.accept_prob)), _ACCEPTANCE_WORDS[True]
    return float(np.mean(run.accepted)), _ACCEPTANCE_WORDS[False]


def _depth_warning(run):
    """The plain-word warning when NUTS trees stop at the depth limit often, or None."""
    if not _uses_trees(run) or not run.n_draws:
        return None
    hit = np.asarray(run.extras["depth_limit_hit"], dtype=bool)
    share = float(np.mean(hit))
    if not share > DEPTH_LIMIT_SHARE:
        return None
    depth = int(run.kernel.max_depth)
    return (f"{share:.0%} of transitions ({int(hit.sum())} of {hit.size}) stopped at the maximum "
            f"tree depth ({depth} doublings, {2 ** depth - 1} leapfrog steps) before the "
            "trajectory turned back: the sampler cannot take the long trajectories this posterior "
            "needs, so draws move slowly and cost many gradients. A mass matrix that matches the "
            "posterior's scales, or a reparameterisation, usually helps more than raising "
            "max_depth.")


class Run:
    """Everything recorded by a sampling run.

    Attributes
    ----------
    draws : ndarray, shape (chain, draw, dim)
        On the user's scale.
    unconstrained : ndarray, shape (chain, draw, dim)
        The same draws on the sampler's scale. Without bounds the two scales
        coincide and ``unconstrained is draws``: one array, not a copy, made
        read-only so that neither can change alone (copy it to edit it).
    accepted, divergent : ndarray of bool, shape (chain, draw)
    accept_prob, energy, energy_error, step_size : ndarray of float, shape (chain, draw)
    n_grad : ndarray of int32, shape (chain, draw)
        Gradient evaluations used by each transition (int32 holds every
        count exactly; sums such as ``total_grad`` are taken in int64).
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
        Replays of divergent transitions (the latest 500), each a
        ``core.sampling.DivergenceReplay`` that unpacks and indexes like that
        tuple and integrates its trajectory only when first read.
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
            records.setdefault(k, np.empty((n_chains, z.shape[1]), dtype=_EMPTY_DTYPES.get(k, float)))
        if getattr(kernel, "u_per_coordinate", False) and records["u"].ndim == 2:
            records["u"] = np.empty((n_chains, z.shape[1], dim))  # no draws yet
        if target.bounded:
            draws = target.to_user(z)
        else:  # one array for both scales: no copy (read-only, so neither changes alone)
            draws = z
            draws.flags.writeable = False
        return cls(draws, z, records, fields, target=target, kernel=kernel, seed=seed,
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
        rate, what = _acceptance(self)
        if self.n_warmup:
            warm = (f" after {self.n_warmup} warm-up"
                    f"{' (automatic length; warmup=0 switches it off)' if self.warmup_auto else ''}")
        else:
            warm = ", no warm-up"
        return (f"Run({kname}: {self.n_chains} chains x {self.n_draws} draws{warm}, dim={self.dim}, "
                f"{what} {rate:.2f}, "
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


@dataclass(frozen=True)
class Column:
    """One column of the per-parameter digest.

    Attributes
    ----------
    key : str
        The name in ``Digest.table``, ``digest[key]``, ``as_dict()`` and ``summary.json``.
    label : str
        Short heading for printed tables; ``{low}`` and ``{high}`` stand for the
        quantile levels in percent.
    description : str
        What the number is, in a sentence (shown as a tooltip in HTML tables).
    kind : {"rhat", "ess", "value"}
        How it is formatted and flagged: ``"ess"`` as a whole number, flagged below
        ``ESS_PER_CHAIN_LIMIT`` per chain; ``"rhat"`` flagged above ``RHAT_LIMIT``.
    """

    key: str
    label: str
    description: str
    kind: str = "value"

    def heading(self, probs=(0.05, 0.95)):
        """The label with the quantile levels filled in."""
        return self.label.format(**_levels(probs))

    def describe(self, probs=(0.05, 0.95)):
        """The description with the quantile levels filled in."""
        return self.description.format(**_levels(probs))

    def needs_attention(self, value, n_chains):
        """True when ``value`` crosses this column's warning level (R-hat, ESS)."""
        if value is None or not np.isfinite(value):
            return False
        if self.kind == "rhat":
            return value > RHAT_LIMIT
        if self.kind == "ess":
            return value < ESS_PER_CHAIN_LIMIT * n_chains
        return False


def _levels(probs):
    return {"low": f"{100 * probs[0]:g}", "high": f"{100 * probs[1]:g}"}


#: The digest's columns, in the order shown: first what may need attention (do the chains
#: agree, how many effective draws), then the estimates and their Monte Carlo error.
COLUMNS = (
    Column("split_rhat", "R-hat",
           "rank-normalised split R-hat (Vehtari et al. 2021): about 1 when the chains agree; "
           f"above {RHAT_LIMIT} they disagree", "rhat"),
    Column("bulk_ess", "bulk ESS",
           "effective sample size for the centre of the distribution (rank-normalised "
           "split chains)", "ess"),
    Column("tail_ess", "tail ESS",
           "effective sample size for the 5% and 95% quantiles (the smaller of the two)", "ess"),
    Column("posterior_mean", "mean", "mean of the draws, chains pooled"),
    Column("mcse_of_mean", "mean MCSE", "Monte Carlo standard error of that mean"),
    Column("posterior_sd", "sd", "standard deviation of the draws, chains pooled"),
    Column("quantile_low", "{low}%", "the lower quantile of the draws ({low}%)"),
    Column("quantile_high", "{high}%", "the upper quantile of the draws ({high}%)"),
)


class Digest:
    """Per-parameter table and run-level checks; see ``Run.summary``.

    Columns, in this order (``COLUMNS`` defines them once; text, HTML, JSON and
    the report all read it):

    ``split_rhat`` (R-hat)
        Rank-normalised split R-hat: about 1 when the chains agree, flagged above
        ``RHAT_LIMIT`` (1.01).
    ``bulk_ess``, ``tail_ess`` (bulk ESS, tail ESS)
        Effective sample size for the centre of the distribution and for its 5%
        and 95% quantiles; flagged below ``ESS_PER_CHAIN_LIMIT`` (100) per chain.
    ``posterior_mean``, ``mcse_of_mean`` (mean, mean MCSE)
        Mean of the draws (chains pooled) and its Monte Carlo standard error.
    ``posterior_sd`` (sd)
        Standard deviation of the draws.
    ``quantile_low``, ``quantile_high`` (5%, 95% by default)
        Quantiles of the draws at ``probs``.

    R-hat needs 8 draws per chain, the ESS columns and the MCSE
    ``MIN_ESS_DRAWS`` (20; see ``core.efficiency``); they are NaN below.
    ``digest[key]`` is one column, an ndarray of shape (dim,).

    With more than ``MANY`` (12) parameters the printed summary (text and HTML)
    first lists the five worst-mixing ones (see ``worst_mixing``) under a
    heading; the full table follows.
    """

    column_specs = COLUMNS
    columns = tuple(c.key for c in COLUMNS)

    #: Above this many parameters the printed summary lists the worst-mixing ones first.
    MANY = 12

    def __init__(self, names, table, run_info, warnings, probs=(0.05, 0.95)):
        self.names = tuple(names)
        self.table = table  # dict column -> ndarray (dim,)
        self.run_info = run_info
        self.warnings = list(warnings)
        self.probs = tuple(probs)

    def headings(self):
        """``{key: short heading}`` for printed tables (quantile levels filled in)."""
        return {c.key: c.heading(self.probs) for c in COLUMNS}

    @classmethod
    def from_run(cls, run, probs=(0.05, 0.95)):

        x = run.draws
        nan = np.full(x.shape[2], np.nan)
        enough = x.shape[1] >= MIN_ESS_DRAWS
        table = {
            "split_rhat": dg.rhat(x) if x.shape[1] >= 8 else nan,
            "bulk_ess": dg.ess(x, method="bulk") if enough else nan,
            "tail_ess": dg.ess(x, method="tail") if enough else nan,
            "posterior_mean": x.mean(axis=(0, 1)),
            "mcse_of_mean": dg.mcse(x, kind="mean") if enough else nan,
            "posterior_sd": x.std(axis=(0, 1), ddof=1) if x.shape[0] * x.shape[1] > 1 else nan,
            "quantile_low": np.quantile(x, probs[0], axis=(0, 1)),
            "quantile_high": np.quantile(x, probs[1], axis=(0, 1)),
        }
        grads = run.total_grad
        # E-BFMI measures how well a *fresh* momentum draw moves between energy levels;
        # with persistent momentum (partial refresh, persistence > 0) it does not apply.
        energy_ok = (run.energy is not None and run.n_draws >= 8
                     and np.all(np.isfinite(run.energy)) and run.kernel is not None
                     and getattr(run.kernel, "uses_gradient", False)
                     and getattr(run.kernel, "persistence", 0.0) == 0.0)
        bfmi = dg.ebfmi(run.energy) if energy_ok else np.full(run.n_chains, np.nan)
        bfmi = np.atleast_1d(bfmi)
        min_ess = float(np.nanmin(table["bulk_ess"])) if np.any(np.isfinite(table["bulk_ess"])) else np.nan
        info = {
            "chains": run.n_chains,
            "draws_per_chain": run.n_draws,
            "warmup": run.n_warmup,
            "acceptance": _acceptance(run)[0],
            "divergences": run.n_divergent,
            "gradient_evaluations": grads,
            "lowest_bulk_ess": min_ess,
            "ess_per_gradient": ess_per_gradient(run),
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
        depth = _depth_warning(run)
        if depth:
            warnings.append(depth)
        low = [f"chain {i} ({b:.2f})" for i, b in enumerate(bfmi) if np.isfinite(b) and b < EBFMI_LIMIT]
        if low:
            warnings.append(
                f"E-BFMI below {EBFMI_LIMIT} in {', '.join(low)}: momentum resampling explores the "
                "energy levels poorly (heavy tails or a badly scaled metric)."
            )
        bad_rhat = [n for n, r in zip(run.names, table["split_rhat"]) if np.isfinite(r) and r > RHAT_LIMIT]
        if bad_rhat:
            warnings.append(
                f"R-hat above {RHAT_LIMIT} for {', '.join(bad_rhat)}: the chains disagree; run longer "
                "or look for multimodality or stuck chains."
            )
        limit = ESS_PER_CHAIN_LIMIT * run.n_chains
        low_ess = [n for n, e in zip(run.names, np.minimum(table["bulk_ess"], table["tail_ess"]))
                   if np.isfinite(e) and e < limit]
        if low_ess:
            warnings.append(
                f"ESS below {limit} ({ESS_PER_CHAIN_LIMIT} per chain) for {', '.join(low_ess)}: "
                "estimates are noisy; run longer or improve the sampler's settings."
            )
        cap = dg.ess_upper_bound(run.n_chains, 2 * (run.n_draws // 2))
        capped = [n for n, e in zip(run.names, table["bulk_ess"])
                  if np.isfinite(e) and np.isfinite(cap) and e >= 0.999 * cap]
        info["ess_at_upper_bound"] = capped
        if capped:
            warnings.append(
                f"bulk ESS of {', '.join(capped)} sits at the estimator's upper bound "
                f"(S log10 S = {cap:.0f} for S = {run.n_chains * run.n_draws} draws): the chains are "
                "strongly antithetic there and the number is a cap, not a measured value."
            )
        return cls(run.names, table, info, warnings, probs)

    def as_dict(self):
        """JSON-friendly dict: the columns' meaning, parameters, run-level figures, warnings
        and the caution."""
        params = {
            name: {c: _jsonable(self.table[c][i]) for c in self.columns}
            for i, name in enumerate(self.names)
        }
        return {
            "columns": {c.key: c.describe(self.probs) for c in COLUMNS},
            "parameters": params,
            "run": {k: _jsonable(v) for k, v in self.run_info.items()},
            "warnings": list(self.warnings),
            "caution": CAUTION,
        }

    def __getitem__(self, column):
        return self.table[column]

    def worst_mixing(self, k=5):
        """Indices of the ``k`` worst-mixing parameters, worst first.

        A parameter's ESS rank orders ``min(bulk_ess, tail_ess)`` from the
        lowest, its R-hat rank orders ``split_rhat`` from the highest; it counts
        as bad as the better (smaller) of its two ranks, ties broken by the
        other rank. Parameters whose ESS and R-hat are both NaN come last.
        Returns an ndarray of int of shape (min(k, dim),); names are
        ``[digest.names[i] for i in ...]``.
        """
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
            raise ValueError(f"`k` must be a positive integer, got {k!r}")
        dim = len(self.names)
        ess = np.fmin(self.table["bulk_ess"], self.table["tail_ess"])
        rhat = np.asarray(self.table["split_rhat"], dtype=float)
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
            for c in COLUMNS:
                v = self.table[c.key][i]
                cells.append(f"{v:>10.0f}" if c.kind == "ess" and np.isfinite(v) else f"{v:>10.4g}")
            rows.append(f"{self.names[i]:<{width}} " + " ".join(cells))
        return rows

    def __str__(self):
        width = max([len(n) for n in self.names] + [8])
        head = f"{'':<{width}} " + " ".join(f"{h:>10}" for h in self.headings().values())
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
            f"{ri['chains']} chains x {ri['draws_per_chain']} draws, "
            f"{_ACCEPTANCE_WORDS[bool(ri['kernel'] and ri['kernel'].get('kernel') == 'NUTS')]} "
            f"{ri['acceptance']:.3f}, "
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

        head = "<th>parameter</th>" + "".join(
            f'<th title="{html.escape(c.describe(self.probs))}">{html.escape(c.heading(self.probs))}</th>'
            for c in COLUMNS)
        n_chains = self.run_info.get("chains", 1)

        def cell(c, v):
            text = f"{v:,.0f}" if c.kind == "ess" and np.isfinite(v) else f"{v:.4g}"
            if c.needs_attention(v, n_chains):
                return f'<td style="font-weight:bold">\u26a0 {text}</td>'
            return f"<td>{text}</td>"

        def body(indices):
            out = []
            for i in indices:
                cells = "".join(cell(c, self.table[c.key][i]) for c in COLUMNS)
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
