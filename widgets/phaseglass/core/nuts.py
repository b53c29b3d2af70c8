"""The no-U-turn sampler: HMC that picks its trajectory length by doubling until the path turns back.

One transition draws a fresh momentum and grows a trajectory by doublings:
each doubling picks a direction at random and integrates a subtree of
``2**j`` leapfrog steps from that end of the trajectory. The subtree is
abandoned (and the tree stops) when it diverges or when one of its own
sub-subtrees turns back; otherwise its candidate joins the trajectory and
the whole trajectory is checked for a U-turn. The next state is drawn from
the trajectory's states with weights ``exp(-H)``: uniformly (multinomially)
within a subtree, biased toward the new subtree when two are merged
(Hoffman & Gelman, "The No-U-Turn Sampler", JMLR 15, 2014; Betancourt, "A
Conceptual Introduction to Hamiltonian Monte Carlo", arXiv:1701.02434, 2017,
the sections on dynamic trajectory lengths: multinomial sampling and the
generalised U-turn criterion ``p_sharp(-) . rho > 0 and p_sharp(+) . rho > 0`` with
``rho`` the sum of the momenta and ``p_sharp = M^-1 p``).

Batching: every chain runs the same doubling loop; a chain whose tree has
finished (or whose subtree stopped early) waits, masked, and only the rows
still moving are integrated, so gradient counts are honest per chain.
Randomness: each transition takes ``dim`` normals and ``3 * max_depth``
uniforms per chain from the streams whatever the trees do, so chain ``k``'s
draws do not depend on the other chains. The multinomial choice inside a
subtree uses one uniform per subtree, recycled after each decision (if
``u < p`` the next uniform is ``u / p``, else ``(u - p) / (1 - p)``; both are
uniform given the decision), so no stream depends on the tree's size. Each
rescaling coarsens the uniform's resolution by the probability of the
decision taken; with double precision this matters only after a run of
decisions whose joint probability is below about 1e-10, which is that rare.
"""

from dataclasses import dataclass

import numpy as np

from ._validate import as_points, check_finite, check_int
from .kernels import ChainState, Kernel, _Knob, _metric, _positive
from .leapfrog import DEFAULT_MAX_ENERGY_ERROR, Trajectory, _kick_drift_kick
from .streams import Streams
from .target import Target

__all__ = ["NUTS", "DoublingTree", "MAX_DEPTH_LIMIT"]

#: Largest ``max_depth`` accepted: 2**20 - 1 leapfrog steps per transition.
MAX_DEPTH_LIMIT = 20


def _depth(name, value):
    return check_int(name, value, minimum=1, maximum=MAX_DEPTH_LIMIT)


class NUTS(Kernel):
    """The no-U-turn sampler with multinomial selection and the generalised U-turn criterion.

    Parameters
    ----------
    step_size : float > 0
        Leapfrog step size (tuned by warm-up toward a mean acceptance
        statistic of 0.8).
    max_depth : int in 1..20
        At most ``max_depth`` doublings, so at most ``2**max_depth - 1``
        leapfrog steps per transition (10 is common practice).
    metric : Metric or array, optional
        Inverse mass matrix (identity by default).
    max_energy_error : float
        Largest ``|energy error|`` of any state in the tree before the tree
        counts as divergent, as for ``HMC`` (1000, common practice). A divergent subtree is
        discarded and the tree stops.

    Notes
    -----
    Records beside the standard ones (``run.extras``, shaped (chain, draw)):
    ``tree_depth`` (doublings made, the abandoned one included),
    ``n_leapfrog`` (leapfrog steps, equal to ``n_grad``),
    ``depth_limit_hit`` (the tree stopped only because it reached
    ``max_depth``) and ``turned`` (it stopped at a U-turn).
    ``accept_prob`` is the acceptance statistic: the mean over every state
    the tree integrated of ``min(1, exp(H0 - H))`` (0 for a divergent
    state), the quantity dual averaging steers. ``accepted`` says whether
    the chain moved; ``energy`` is the Hamiltonian of the selected state and
    ``energy_error`` its difference from the start's (for a divergent
    transition, the error that crossed the threshold). ``u`` is the merge
    uniform of the chain's last doubling (it decided whether that subtree's
    candidate replaced the selected state, when the subtree was merged).

    A divergent transition is replayed by the sampler from its start with
    the momentum pointing the way the divergent subtree grew
    (``start_momentum``, negated for a backward doubling) for as many steps
    as separate the start from the divergent state (``replay_steps``): the
    leapfrog states on that side of the tree are exactly that trajectory.

    With ``Sampler.step(record=True)`` the sampler's ``last_trajectory`` is a
    ``DoublingTree``: every state the tree integrated, in time order, with
    the start, the selected state, the doubling each state came from and
    whether it was merged.

    Examples
    --------
    >>> import phaseglass as pg
    >>> run = pg.sample(pg.demos.correlated_gaussian(), pg.NUTS(0.3), n_draws=50, warmup=0,
    ...                 n_chains=2, seed=1)
    >>> sorted(run.extras)
    ['depth_limit_hit', 'n_leapfrog', 'tree_depth', 'turned']
    """

    uses_gradient = True
    tuned_knob = "step_size"
    default_target_accept = 0.8
    moves_when_divergent = True  # the tree's valid part is kept when a subtree diverges
    step_size = _Knob(_positive)
    max_depth = _Knob(_depth)
    metric = _Knob(_metric)
    max_energy_error = _Knob(_positive)

    def __init__(self, step_size, max_depth=10, *, metric=None,
                 max_energy_error=DEFAULT_MAX_ENERGY_ERROR):
        self.step_size = step_size
        self.max_depth = max_depth
        self.metric = metric
        self.max_energy_error = max_energy_error

    def settings(self):
        return {"kernel": "NUTS", "step_size": self.step_size, "max_depth": self.max_depth,
                "max_energy_error": self.max_energy_error, "metric": self.metric.as_dict()}

    # ----------------------------------------------------------------- one tree
    def build_tree(self, target, position, momentum, *, seed=None):
        """Grow one transition's tree from a given start and momentum, for looking at it.

        The directions and the multinomial choices come from ``seed``
        (the same seed gives the same tree); evaluations are not counted
        on ``target`` (a preview is not sampling work).

        Parameters
        ----------
        target : Target
        position, momentum : array_like, shape (dim,)
            On the sampler's (unconstrained) scale.
        seed : None, int, SeedSequence or Generator

        Returns
        -------
        tree : DoublingTree
            One chain's tree (a batch of one: fields keep their leading axis).
        info : dict
            The transition's records (``tree_depth``, ``n_leapfrog``, ...), each shaped (1,).

        Examples
        --------
        >>> import phaseglass as pg
        >>> tree, info = pg.NUTS(0.3).build_tree(pg.demos.correlated_gaussian(), [1.0, 0.0],
        ...                                      [0.0, 1.0], seed=2)
        >>> int(info["n_leapfrog"][0]) == int(np.sum(tree.doubling[0] >= 0))
        True
        """
        if not isinstance(target, Target):
            raise TypeError(f"`target` must be a phaseglass Target, got {type(target).__name__}")
        uniforms = Streams(seed, 1).uniform(3 * self.max_depth)
        return self._tree_with(target, position, momentum, uniforms)

    def _tree_with(self, target, position, momentum, uniforms):
        """``build_tree`` with the transition's uniforms given, shape (1, 3 * max_depth)."""
        q, _ = as_points("position", position, target.dim)
        p, _ = as_points("momentum", momentum, target.dim)
        check_finite("position", q)
        check_finite("momentum", p)
        if q.shape != (1, target.dim) or p.shape != (1, target.dim):
            raise ValueError(f"`position` and `momentum` must each have shape ({target.dim},), "
                             f"got {np.shape(position)} and {np.shape(momentum)}")
        self.prepare(target)
        counts = (target.n_density, target.n_grad)
        try:
            with np.errstate(all="ignore"):
                logp, grad = target._value_and_grad_rows(q)
            if not (np.isfinite(logp).all() and np.isfinite(grad).all()):
                raise ValueError(f"`position` {q[0]} has a non-finite log-density or gradient; "
                                 f"start inside the support")
            state = ChainState(q, logp, grad)
            info = self._grow(target, state, p, np.asarray(uniforms, dtype=float).reshape(1, -1),
                              True)
        finally:
            target.n_density, target.n_grad = counts
        return info.pop("trajectory"), info

    # ----------------------------------------------------------------- transition
    def _transition(self, target, state, streams, record):
        dim = state.position.shape[1]
        p0 = self.metric.momentum_from_normal(streams.normal(dim))
        uniforms = streams.uniform(3 * self.max_depth)  # per doubling: direction, selection, merge
        return self._grow(target, state, p0, uniforms, record)

    def _grow(self, target, state, p0, uniforms, record):
        """Grow the tree from ``state`` with momentum ``p0``; move the chains; return records."""
        n, dim = state.position.shape
        depth_max = self.max_depth
        eps = float(self.step_size)
        half = 0.5 * eps
        metric = self.metric
        velocity, kinetic = metric.velocity, metric.kinetic
        vg = target._value_and_grad_rows
        limit = self.max_energy_error

        start_q, start_lp = state.position, state.logp
        h0 = kinetic(p0) - state.logp

        # ends of the trajectory (actual momenta), and the selected state
        left_q, left_p, left_lp, left_g = (state.position.copy(), p0.copy(), state.logp.copy(),
                                           state.grad.copy())
        right_q, right_p, right_lp, right_g = (left_q.copy(), left_p.copy(), left_lp.copy(),
                                               left_g.copy())
        sel_q, sel_lp, sel_g = left_q.copy(), left_lp.copy(), left_g.copy()
        sel_h = h0.copy()
        log_w = np.zeros(n)              # log of the trajectory's total weight, exp(H0 - H)
        rho = p0.copy()                  # sum of the momenta over the trajectory
        growing = np.ones(n, dtype=bool)
        moved = np.zeros(n, dtype=bool)
        divergent = np.zeros(n, dtype=bool)
        turned = np.zeros(n, dtype=bool)
        tree_depth = np.zeros(n, dtype=int)
        n_leap = np.zeros(n, dtype=int)
        sum_accept = np.zeros(n)
        steps_side = np.zeros((n, 2), dtype=int)  # steps taken backward [0] and forward [1]
        replay_dir = np.ones(n)
        replay_steps = np.zeros(n, dtype=int)
        div_error = np.full(n, np.nan)
        last_u = uniforms[:, 2].copy()
        sel_offset = np.zeros(n, dtype=int)
        merged = np.zeros((n, depth_max), dtype=bool)
        directions = np.zeros((n, depth_max), dtype=int)  # +1 forward, -1 backward, 0 not made
        turn_ends = np.zeros((n, 2), dtype=int)  # time offsets of the states compared
        turn_whole = np.zeros(n, dtype=bool)     # the whole trajectory turned (not a subtree)
        leaves = [] if record else None

        with np.errstate(all="ignore"):
            for j in range(depth_max):
                rows = np.flatnonzero(growing)
                if rows.size == 0:
                    break
                d = np.where(uniforms[rows, 3 * j] < 0.5, -1.0, 1.0)
                directions[rows, j] = d.astype(int)
                fwd = d > 0
                # the subtree grows from the chosen end; work in the frame where it moves forward
                cq = np.where(fwd[:, None], right_q[rows], left_q[rows])
                cp = np.where(fwd[:, None], right_p[rows], -left_p[rows])
                clp = np.where(fwd, right_lp[rows], left_lp[rows])
                cg = np.where(fwd[:, None], right_g[rows], left_g[rows])
                sub = _Subtree(rows.size, dim, j, uniforms[rows, 3 * j + 1])
                h0r = h0[rows]
                m = rows.size
                side = np.where(fwd, 1, 0)
                step_dir = np.where(fwd, 1, -1)
                base_off = steps_side[rows, side]  # steps already taken on that side
                leap = n_leap[rows]
                acc = sum_accept[rows]  # summed leaf by leaf, in the order of the leaves
                live = np.ones(m, dtype=bool)  # still building this subtree
                n_live = m
                for i in range(2 ** j):
                    if n_live == 0:
                        break
                    # every row alive: slices (views) instead of index arrays, the common case
                    if n_live == m:
                        idx, ix = None, slice(None)
                        qn, pn, lpn, gn = _kick_drift_kick(cq, cp, cg, eps, half, velocity, vg)
                    else:
                        idx = ix = np.flatnonzero(live)
                        qn, pn, lpn, gn = _kick_drift_kick(cq[idx], cp[idx], cg[idx], eps, half,
                                                           velocity, vg)
                    hn = kinetic(pn) - lpn
                    err = hn - h0r[ix]
                    ok = np.abs(err) <= limit  # False for NaN too
                    leap[ix] += 1
                    acc[ix] += np.where(ok, np.exp(np.minimum(0.0, -err)), 0.0)
                    offset = step_dir[ix] * (base_off[ix] + i + 1)
                    if leaves is not None:
                        leaves.append((rows[ix], offset, j, qn.copy(), d[ix, None] * pn,
                                       lpn.copy(), hn + lpn))
                    if not ok.all():
                        if idx is None:
                            idx = np.arange(m)
                        bad = idx[~ok]
                        live[bad] = False
                        sub.failed[bad] = True
                        rb = rows[bad]
                        divergent[rb] = True
                        div_error[rb] = err[~ok]
                        replay_dir[rb] = d[bad]
                        replay_steps[rb] = base_off[bad] + i + 1
                        idx = ix = idx[ok]
                        qn, pn, lpn, gn, hn, err, offset = (qn[ok], pn[ok], lpn[ok], gn[ok],
                                                            hn[ok], err[ok], offset[ok])
                    if idx is None:
                        cq, cp, clp, cg = qn, pn, lpn, gn
                    else:
                        cq[idx], cp[idx], clp[idx], cg[idx] = qn, pn, lpn, gn
                    sub.add(i, ix, qn, pn, lpn, gn, hn, -err, velocity(pn), offset)
                    live &= ~sub.failed
                    n_live = np.count_nonzero(live)
                n_leap[rows] = leap
                sum_accept[rows] = acc
                # ---- merge the finished subtrees into their trajectories
                ok_sub = ~sub.failed
                stop = rows[~ok_sub]
                growing[stop] = False
                turned[rows[sub.turned]] = True
                turn_ends[rows[sub.turned]] = sub.turn_ends[sub.turned]
                tree_depth[rows] = j + 1
                last_u[rows] = uniforms[rows, 3 * j + 2]
                if not ok_sub.any():
                    continue
                k = np.flatnonzero(ok_sub)
                r = rows[k]
                merged[r, j] = True
                u = uniforms[r, 3 * j + 2]
                take = np.log(u) < sub.log_w[k] - log_w[r]  # biased progressive sampling
                t_rows, t_k = r[take], k[take]
                sel_q[t_rows], sel_lp[t_rows], sel_g[t_rows] = (sub.q[t_k], sub.lp[t_k],
                                                                sub.g[t_k])
                sel_h[t_rows] = sub.h[t_k]
                sel_offset[t_rows] = sub.offset[t_k]
                moved[t_rows] = True
                log_w[r] = np.logaddexp(log_w[r], sub.log_w[k])
                dk = d[k]
                rho[r] += dk[:, None] * sub.rho[k]
                steps_side[r, side[k]] += 2 ** j
                f, b = k[dk > 0], k[dk < 0]
                rf, rb = rows[f], rows[b]
                right_q[rf], right_p[rf], right_lp[rf], right_g[rf] = cq[f], cp[f], clp[f], cg[f]
                left_q[rb], left_p[rb], left_lp[rb], left_g[rb] = cq[b], -cp[b], clp[b], cg[b]
                # the generalised U-turn criterion on the whole trajectory
                rr = rho[r]
                u_turn = _turned_back(velocity(left_p[r]), velocity(right_p[r]), rr)
                growing[r[u_turn]] = False
                turned[r[u_turn]] = True
                ru = r[u_turn]
                turn_ends[ru, 0] = -steps_side[ru, 0]
                turn_ends[ru, 1] = steps_side[ru, 1]
                turn_whole[ru] = True

        state.position, state.logp, state.grad = sel_q, sel_lp, sel_g
        hit = growing & (tree_depth == depth_max)
        energy_error = np.where(divergent, div_error, sel_h - h0)
        tree = None
        if leaves is not None:
            tree = _assemble(leaves, start_q, p0, start_lp, h0, sel_offset, merged, divergent,
                             (replay_dir * replay_steps).astype(int), eps, limit,
                             directions, np.where(turned[:, None], turn_ends, 0), turned,
                             turn_whole)
        return {
            "accepted": moved,
            "accept_prob": sum_accept / np.maximum(n_leap, 1),
            "energy": sel_h,
            "energy_error": energy_error,
            "divergent": divergent,
            "n_grad": n_leap.copy(),
            "u": last_u,
            "step_size": np.full(n, eps),
            "tree_depth": tree_depth,
            "n_leapfrog": n_leap,
            "depth_limit_hit": hit,
            "turned": turned,
            "start_momentum": p0 * replay_dir[:, None],
            "replay_steps": replay_steps,
            "trajectory": tree,
        }


def _turned_back(sharp_first, sharp_last, rho):
    """The generalised U-turn criterion: either end's ``M^-1 p`` points against ``rho``.

    Arrays are (n, dim); returns (n,) bool (Betancourt 2017, dynamic trajectory lengths).
    """
    dot = np.add.reduce  # np.sum without its wrapper: this runs for every leaf
    return (dot(sharp_first * rho, axis=1) <= 0) | (dot(sharp_last * rho, axis=1) <= 0)


class _Subtree:
    """A subtree of ``2**depth`` leaves being built for a batch of rows (internal).

    Holds the multinomial candidate, the subtree's log-weight and momentum
    sum, and for every level of the binary tree inside it the momentum sum
    and ``p_sharp`` at the first leaf of the node being filled, so that each
    node is checked for a U-turn the moment its last leaf arrives.
    """

    def __init__(self, n, dim, depth, u):
        self.depth = depth
        self.u = u.copy()            # the recycled selection uniform
        self.log_w = np.full(n, -np.inf)
        self.rho = np.zeros((n, dim))
        self.q = np.full((n, dim), np.nan)
        self.g = np.full((n, dim), np.nan)
        self.lp = np.full(n, np.nan)
        self.h = np.full(n, np.nan)
        self.offset = np.zeros(n, dtype=int)
        self.failed = np.zeros(n, dtype=bool)   # diverged or turned
        self.turned = np.zeros(n, dtype=bool)
        self.turn_ends = np.zeros((n, 2), dtype=int)  # offsets of the node that turned
        self.first_sharp = np.zeros((depth + 1, n, dim))
        self.rho_before = np.zeros((depth + 1, n, dim))

    def add(self, i, idx, q, p, lp, g, h, log_w, sharp, offset):
        """Add leaf ``i`` for rows ``idx`` (weights ``log_w = H0 - H``, ``sharp = M^-1 p``).

        ``idx`` is an index array or ``slice(None)`` (every row); ``offset`` is
        the leaf's place in time relative to the start (negative backward).
        """
        every = isinstance(idx, slice)
        if not every and idx.size == 0:
            return
        new_w = np.logaddexp(self.log_w[idx], log_w)
        prob = np.exp(log_w - new_w)
        u = self.u[idx]
        take = u < prob
        self.u[idx] = np.where(take, u / prob, (u - prob) / (1.0 - prob))
        self.log_w[idx] = new_w
        t = np.flatnonzero(take) if every else idx[take]
        self.q[t], self.lp[t], self.g[t], self.h[t] = q[take], lp[take], g[take], h[take]
        self.offset[t] = offset[take]
        for level in range(1, self.depth + 1):
            if i % (2 ** level) == 0:  # first leaf of a node at this level
                self.first_sharp[level, idx] = sharp
                self.rho_before[level, idx] = self.rho[idx]
        self.rho[idx] += p
        for level in range(1, self.depth + 1):
            if (i + 1) % (2 ** level) == 0:  # last leaf: check the node
                rho = self.rho[idx] - self.rho_before[level, idx]
                u_turn = _turned_back(self.first_sharp[level, idx], sharp, rho)
                bad = np.flatnonzero(u_turn) if every else idx[u_turn]
                if bad.size:
                    new = ~self.turned[bad]  # the first (smallest) node that turned is kept
                    last = offset[u_turn][new]
                    self.turn_ends[bad[new], 0] = last - np.sign(last) * (2 ** level - 1)
                    self.turn_ends[bad[new], 1] = last
                self.failed[bad] = True
                self.turned[bad] = True


@dataclass(frozen=True, repr=False)
class DoublingTree(Trajectory):
    """Every state one NUTS transition integrated, in time order, for a batch of chains.

    The fields of ``Trajectory`` (batch form, a leading chain axis) hold the
    tree's states from its earliest to its latest, NaN-padded to the longest
    tree in the batch; ``energy_error`` is relative to the transition's start
    (not to row 0), and ``divergence_step`` is the row of the divergent state
    (-1 when none). Momenta are the actual momenta (backward doublings were
    integrated with the momentum reversed and are stored turned back).

    Attributes
    ----------
    start : ndarray of int, shape (chains,)
        Row of the transition's start.
    selected : ndarray of int, shape (chains,)
        Row of the state the transition moved to.
    doubling : ndarray of int, shape (chains, rows)
        Which doubling (0, 1, ...) integrated each state; -1 at the start,
        -2 on padding.
    merged : ndarray of bool, shape (chains, rows)
        Whether the state belongs to the trajectory the next state was drawn
        from (False for the abandoned last subtree: it turned or diverged).
    directions : ndarray of int, shape (chains, max_depth)
        Direction of each doubling in the order made: +1 forward in time, -1
        backward, 0 for a doubling not made.
    turn_rows : ndarray of int, shape (chains, 2)
        Rows of the two states whose momenta the U-turn criterion compared
        when it stopped the tree (earliest first): the ends of the smallest
        node of a subtree that turned, or the ends of the whole trajectory;
        -1 when the tree did not stop at a U-turn.
    turn_whole : ndarray of bool, shape (chains,)
        The U-turn was found on the whole trajectory (not inside a subtree).
    selection_prob : ndarray of float, shape (chains, rows)
        Probability that each state is the one the transition moves to, given
        the tree (multinomial weights within a subtree times the biased merge
        probabilities; 0 for the abandoned subtree, NaN on padding). Sums to 1.
    """

    start: np.ndarray = None
    selected: np.ndarray = None
    doubling: np.ndarray = None
    merged: np.ndarray = None
    directions: np.ndarray = None
    turn_rows: np.ndarray = None
    turn_whole: np.ndarray = None
    selection_prob: np.ndarray = None

    def __repr__(self):
        return (f"DoublingTree(batch of {self.positions.shape[0]} chains, up to "
                f"{self.positions.shape[1]} states, {int(np.sum(self.divergent))} divergent)")


def _selection_prob(energy_error, doubling, is_merged, n_doublings):
    """P(each state is selected | tree) for one chain's rows (see DoublingTree.selection_prob)."""
    log_w = -energy_error
    prob = np.where(doubling == -2, np.nan, 0.0)
    groups = [doubling == -1] + [(doubling == j) & is_merged for j in range(n_doublings)]
    groups = [g for g in groups if g.any()]
    group_w = [np.logaddexp.reduce(log_w[g]) for g in groups]
    # chance that group k's candidate is taken when it is merged, and then kept to the end
    take = [1.0]
    before = group_w[0]
    for w in group_w[1:]:
        take.append(float(np.exp(min(0.0, w - before))))
        before = np.logaddexp(before, w)
    keep = 1.0
    for k in range(len(groups) - 1, -1, -1):
        g = groups[k]
        prob[g] = take[k] * keep * np.exp(log_w[g] - group_w[k])
        keep *= 1.0 - take[k]
    return prob


def _assemble(leaves, start_q, p0, start_lp, h0, sel_offset, merged, divergent, div_offset, eps,
              limit, directions, turn_ends, turned, turn_whole):
    """Gather the recorded leaves into a DoublingTree (time order, NaN-padded)."""
    n, dim = start_q.shape
    lo = np.zeros(n, dtype=int)
    hi = np.zeros(n, dtype=int)
    for rows, off, *_ in leaves:
        np.minimum.at(lo, rows, off)
        np.maximum.at(hi, rows, off)
    size = int(np.max(hi - lo)) + 1
    base = -lo
    positions = np.full((n, size, dim), np.nan)
    momenta = np.full((n, size, dim), np.nan)
    potential = np.full((n, size), np.nan)
    kinetic = np.full((n, size), np.nan)
    doubling = np.full((n, size), -2)
    chains = np.arange(n)
    positions[chains, base], momenta[chains, base] = start_q, p0
    potential[chains, base] = -start_lp
    kinetic[chains, base] = h0 + start_lp
    doubling[chains, base] = -1
    is_merged = np.zeros((n, size), dtype=bool)
    is_merged[chains, base] = True
    for rows, off, j, q, p, lp, kin in leaves:
        at = base[rows] + off
        positions[rows, at], momenta[rows, at] = q, p
        potential[rows, at], kinetic[rows, at] = -lp, kin
        doubling[rows, at] = j
        is_merged[rows, at] = merged[rows, j]
    ham = potential + kinetic
    error = ham - h0[:, None]
    prob = np.stack([_selection_prob(error[c], doubling[c], is_merged[c], merged.shape[1])
                     for c in range(n)])
    return DoublingTree(
        positions=positions, momenta=momenta, potential=potential, kinetic=kinetic,
        hamiltonian=ham, energy_error=error, divergent=divergent.copy(),
        divergence_step=np.where(divergent, base + div_offset, -1), step_size=np.full(n, eps),
        n_steps=size - 1, max_energy_error=limit, start=base, selected=base + sel_offset,
        doubling=doubling, merged=is_merged, directions=directions.copy(),
        turn_rows=np.where(turned[:, None], np.sort(base[:, None] + turn_ends, axis=1), -1),
        turn_whole=turn_whole & turned, selection_prob=prob)
