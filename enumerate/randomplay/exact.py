"""Exact random play: the probability of every game length and of every player winning.

Two random models (``model=``):

``"moves"``  The player to move picks uniformly among the legal moves of the state, a move
             being a move type applied to a bin (tokens are indistinguishable).  A state
             with d legal moves sends probability 1/d along each of them.
``"pairs"``  The player picks uniformly among the unordered pairs of distinct tokens that can
             move together.  A move that takes one token from each of two bins (a combine
             F(k-1) + F(k) -> F(k+1)) has weight a(k-1) * a(k); a move that takes two tokens
             of one bin (2 F1 -> F2, a split) has weight a(k) * (a(k) - 1) / 2, where a(k)
             is the number of tokens in bin k.  In general a move's weight is the product over
             the bins it takes from of binomial(a(bin), tokens taken).  A state sends
             probability weight / (sum of the weights of its moves) along each move.

The probability of a game is the product of these transition probabilities; the probability
of length L is the sum over the games of L moves.  Player i (1-based) of P wins a game of
length L when (L - 1) mod P == i - 1; a game with no move at all (n = 1) is a "win" for
player P by this convention.

Exactness.  Let D(s) be the total move weight of a non-terminal state s.  Every game's
probability is an integer over the product of D(s) along it, so every length probability
times M = lcm over games of prod D(s) is an integer in [0, M].  M = prod_p p**e_p with
e_p = max over games of sum v_p(D(s)), which a first sweep computes exactly (max-plus
dynamic programming over the states, one exponent per prime p <= max D).  The second sweep
computes every probability modulo primes q below 2**50 (inverses of D(s) mod q from a
table); the integer N = P * M is rebuilt by the Chinese remainder theorem from primes whose
product exceeds M, and one extra prime checks it (CheckPrimeMismatch on disagreement;
the one CRT, `core.modular.reconstruct_fractions`).  The residues also satisfy
sum N == M, which is checked.

Both sweeps *pull*: layers are visited from the start's level downward and each state
gathers from its predecessors (the moves into it), inside a layer in ascending rank, which
is topological (see `statespace`).  The first sweep is the one shared with counting
(`core.sweep.swept_layers`, listing by `core.listing`, collected here by
`random_skeleton`); it keeps the moves into every layer whose source is reachable
(`core.sweep.Incoming`, with their weights), so the second sweep only re-reads them.  A
move may drop the level by up to `max_drop` of the rule set, so the second sweep keeps the
layers level + 1 .. level + max_drop in a ring of max_drop + 1 reused buffers, gathered
by the calls `core.sweep.gather_passes` plans.  When a state is
complete, its row is reduced mod q and multiplied once by D(s)^-1; a move then adds its
source's row times its integer weight -- in the model "moves" every weight is 1, so the
edges are pure vectorised adds and the only multiplications are one per (state, word).

Arithmetic.  Residues are below q < 2**50; a state's row accumulates at most m + 1 residues
(m = moves into it <= number of move types, +1 for the start), which stays below 2**62 and
is reduced once (`core.modular.reduce62`).  Products use a float64 estimate of the quotient
and an exact wrapping remainder (`core.modular.mulmod`, proof in its docstring).  Compared
with primes below 2**31.5 this needs about 37% fewer primes for the same denominator.

Prime blocks are independent: each block runs the whole second sweep in its own thread
(kernels release the GIL).  The winner-only path keeps per state the P residues of length
mod P instead of a window of lengths; it costs O(P) per move instead of O(window).

Shards.  One block's sweep is `random_law_residues` (kernel `pull_mod_windows`) or
`random_win_residues` (kernel `pull_mod_residues`), each returning int64 residues laid out
[prime][column]; their cluster twins are `zeckenum.cluster.random_tasks.random_law_residues_task`
and `random_win_residues_task`.  `assemble_random` turns the residues of all blocks into the
`RandomResult`, for the in-process path (`random_play`) and the cluster path alike.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np
from zeckenum.core.blocks import BlockPlan, block_plan, run_blocks
from zeckenum.core.checks import (
    check_prime_offset,
    check_random_args,
    check_threads,
    thread_count,
)
from zeckenum.core.jit import kernel
from zeckenum.core.memory import available_bytes, refuse_if_over, resolve_limit
from zeckenum.core.modular import (
    add_row_mod,
    check_mul_primes,
    finish_row,
    inverse_table,
    mul_primes_exceeding,
    mulmod,
    reconstruct_fractions,
)
from zeckenum.core.statespace import StateSpace
from zeckenum.core.sweep import drop_stale, gather_passes
from zeckenum.core.text import frac_str
from zeckenum.randomplay.skeleton import (
    Skeleton,
    random_skeleton,
    random_space,
    skeleton_bytes_bound,
    skeleton_nbytes,
    weight_bound,
)
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import RuleSet

# ----------------------------------------------------------------------------- second sweep


@kernel(inline=True)
def _add_into(dv: np.ndarray, sv: np.ndarray) -> None:
    """dv += sv word by word (unreduced; a vectorised loop)."""
    for k in range(sv.size):
        dv[k] += sv[k]


@kernel(inline=True)
def _addmul_into(dv: np.ndarray, sv: np.ndarray, we: int, primes: np.ndarray,
                 pinv: np.ndarray) -> None:
    """dv += (we * sv mod q) for rows of primes.size residues, 0 <= we < every q."""
    nq = primes.size
    for t in range(sv.size // nq):
        a = dv[t * nq : t * nq + nq]
        b = sv[t * nq : t * nq + nq]
        for q in range(nq):
            a[q] += mulmod(b[q], we, primes[q], pinv[q])


@kernel
def pull_mod_windows(
    vals: np.ndarray, off: np.ndarray, lmin: np.ndarray, win: np.ndarray,
    up_vals: np.ndarray, up_off: np.ndarray, up_lmin: np.ndarray, up_win: np.ndarray,
    dsum: np.ndarray, ptr: np.ndarray, drop: np.ndarray, src: np.ndarray, w: np.ndarray,
    unit: bool, primes: np.ndarray, pinv: np.ndarray, inv: np.ndarray, out: np.ndarray,
    which: int = -1,
) -> None:
    """One layer of the exact sweep over length windows, for one block of primes.

    State j owns words off[j] .. off[j+1]-1 laid out [length in its window][prime].  It
    gathers its predecessors' finished rows (times the move's weight unless `unit`),
    shifted by one length; then its words are reduced and multiplied by D(j)^-1, or, for a
    terminal state, added into out[length, q].  `which` selects the moves gathered and
    whether the states are finished, as in `core.sweep.pull_windows`.
    """
    nq = primes.size
    for j in range(win.size):
        wj = win[j]
        if wj == 0:
            continue
        for e in range(ptr[j], ptr[j + 1]):
            # two written-out branches: selecting an array per move would cost reference
            # counting on every move
            i = src[e]
            if which >= 0 and drop[e] != which:
                continue
            if drop[e] == 0:
                span = win[i] * nq
                d0 = off[j] + (lmin[i] + 1 - lmin[j]) * nq
                dv = vals[d0 : d0 + span]
                sv = vals[off[i] : off[i] + span]
            else:
                span = up_win[i] * nq
                d0 = off[j] + (up_lmin[i] + 1 - lmin[j]) * nq
                dv = vals[d0 : d0 + span]
                sv = up_vals[up_off[i] : up_off[i] + span]
            if unit:
                _add_into(dv, sv)
            else:
                _addmul_into(dv, sv, w[e], primes, pinv)
        if which > 0:
            continue
        d = dsum[j]
        for t in range(wj):
            row = vals[off[j] + t * nq : off[j] + t * nq + nq]
            if d == 0:
                add_row_mod(out[lmin[j] + t], row, primes, pinv)
            else:
                finish_row(row, primes, pinv, inv[d])


@kernel
def pull_mod_residues(
    vals: np.ndarray, up_vals: np.ndarray, win: np.ndarray, dsum: np.ndarray,
    ptr: np.ndarray, drop: np.ndarray, src: np.ndarray, w: np.ndarray, unit: bool,
    primes: np.ndarray, pinv: np.ndarray, inv: np.ndarray, out: np.ndarray, which: int = -1,
) -> None:
    """One layer of the winner-only sweep: vals[j, r, q] = P(reach j, length = r mod P).

    Same scheme (and `which`) as `pull_mod_windows`; a move sends residue r to residue
    r + 1 (mod P).  Terminal rows are added into out[r, q].
    """
    npl = vals.shape[1]
    for j in range(win.size):
        if win[j] == 0:
            continue
        for e in range(ptr[j], ptr[j + 1]):
            i = src[e]
            if which >= 0 and drop[e] != which:
                continue
            for r in range(npl):
                dv = vals[j, r + 1 if r + 1 < npl else 0]
                if drop[e] == 0:
                    sv = vals[i, r]
                else:
                    sv = up_vals[i, r]
                if unit:
                    _add_into(dv, sv)
                else:
                    _addmul_into(dv, sv, w[e], primes, pinv)
        if which > 0:
            continue
        d = dsum[j]
        for r in range(npl):
            if d == 0:
                add_row_mod(out[r], vals[j, r], primes, pinv)
            else:
                finish_row(vals[j, r], primes, pinv, inv[d])


# ----------------------------------------------------------------------------- drivers
LAW_PRIMES_PER_BLOCK = 8
"""Most primes in one block of the length law, trading a little time for much memory.
Measured with 2 threads: n = 160 (100 primes): 8 per block 56.3 s and 1.1 GiB, blocks as
large as memory allowed (50) 55.0 s and 5.3 GiB, 4 per block 64.5 s; n = 200 (136
primes): 8 per block 433 s and 4.0 GiB, memory-sized (68) 374 s and 15.3 GiB.  The
winners-only sweep keeps large blocks: its buffers are small and it gains from them
(n = 200: 68 per block 7.9 s, 8 per block 9.3 s)."""

WIN_PRIMES_PER_BLOCK = 34
"""Primes per shard of a sharded winners-only run (the in-process run takes blocks as large
as memory allows); see `LAW_PRIMES_PER_BLOCK` for the measurements."""


def random_block_plan(
    allp: list[int], threads: int | None, words_per_prime: int, extra_per_prime: int,
    what: str, most: int | None, budget: int | None,
) -> BlockPlan:
    """Random play's plan (`core.blocks.block_plan`): as few blocks as the memory allows,
    of at most `most` primes each (None: no limit but memory).

    A block of b primes holds b * (words_per_prime int64 words + `extra_per_prime` bytes)
    at its peak; up to `threads` blocks run at once, fewer when only fewer fit in `budget`
    bytes (default: 80% of the memory the machine has available now, i.e. after the first
    sweep).  MemoryRefused when even one prime does not fit.
    """
    if budget is None:
        budget = int(available_bytes() * 0.8)
    return block_plan(allp, thread_count(threads), per_block=most,
                       prime_bytes=max(1, words_per_prime) * 8 + extra_per_prime,
                       limit=budget, what=what, fewer_threads=True)


def law_words_per_prime(skel: Skeleton) -> int:
    """int64 words per prime of `random_law_residues`'s buffer ring."""
    span = max(1, min(skel.max_drop + 1, len(skel.levels)))
    return span * max(int(skel.win[lv].astype(np.int64).sum()) for lv in skel.levels)


def win_words_per_prime(skel: Skeleton, players: int) -> int:
    """int64 words per prime of `random_win_residues`'s buffer ring."""
    span = max(1, min(skel.max_drop + 1, len(skel.levels)))
    return span * max(skel.win[lv].size for lv in skel.levels) * players


def random_law_residues(skel: Skeleton, primes: np.ndarray | list[int], unit: bool) -> np.ndarray:
    """residues[q, L] = P(length = L) mod primes[q] (as N * M^-1 mod q, see
    `core.modular.reconstruct_fractions`), int64 of shape (len(primes), longest + 1): the
    exact sweep of one prime block.

    `unit`: every move weight is 1 (model "moves").  One shard of the length law: in-process
    `random_play` runs the blocks in threads, its cluster twin is
    `zeckenum.cluster.random_tasks.random_law_residues_task`.  Kernel: `pull_mod_windows`.
    """
    primes = np.asarray(primes, dtype=np.int64)
    nq = primes.size
    pinv = 1.0 / primes.astype(np.float64)
    inv = inverse_table(primes, max(skel.max_weight, 1))
    out = np.zeros((skel.longest + 1, nq), dtype=np.int64)
    sizes = [int(skel.win[lv].astype(np.int64).sum()) * nq for lv in skel.levels]
    # a ring of max_drop + 1 reused buffers: the layers still read are among the max_drop
    # layers swept just before the current one, so none shares its slot
    span = min(skel.max_drop + 1, len(skel.levels))
    ring = [np.empty(max(sizes), dtype=np.int64) for _ in range(max(span, 1))]
    z64 = np.zeros(1, dtype=np.int64)
    z32 = np.zeros(0, dtype=np.int32)
    empty = (z64[:0], z64, z32, z32)
    live: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
    for k, level in enumerate(skel.levels):
        lmin, win = skel.lmin[level], skel.win[level]
        off = np.zeros(win.size + 1, dtype=np.int64)
        np.cumsum(win.astype(np.int64) * nq, out=off[1:])
        vals = ring[k % span][: int(off[-1])]
        vals[:] = 0
        if level == skel.start_level:
            vals[off[skel.start_rank] : off[skel.start_rank + 1]] = 1
        inc = skel.incoming[level]
        for which, src_level in gather_passes(inc.drop, skel.max_drop, level, live):
            pull_mod_windows(vals, off, lmin, win, *live.get(src_level, empty),
                             skel.dsum[level], inc.ptr, inc.drop, inc.src, inc.w, unit, primes,
                             pinv, inv, out, which)
        live[level] = (vals, off, lmin, win)
        drop_stale(live, level, skel.max_drop)
    return np.ascontiguousarray(out.T)


def random_win_residues(skel: Skeleton, primes: np.ndarray | list[int], unit: bool,
                        players: int) -> np.ndarray:
    """residues[q, r] = P(length = r mod players) mod primes[q], int64 of shape
    (len(primes), players): the winner-only sweep of one prime block.

    One shard of the win probabilities: in-process `random_play(winners_only=True)` runs the
    blocks in threads, its cluster twin is `zeckenum.cluster.random_tasks.random_win_residues_task`.
    Kernel: `pull_mod_residues`.
    """
    primes = np.asarray(primes, dtype=np.int64)
    nq = primes.size
    pinv = 1.0 / primes.astype(np.float64)
    inv = inverse_table(primes, max(skel.max_weight, 1))
    out = np.zeros((players, nq), dtype=np.int64)
    cap = max(skel.win[lv].size for lv in skel.levels) * players * nq
    span = min(skel.max_drop + 1, len(skel.levels))  # as in `random_law_residues`
    ring = [np.empty(cap, dtype=np.int64) for _ in range(max(span, 1))]
    empty = np.zeros((0, players, nq), dtype=np.int64)
    live: dict[int, np.ndarray] = {}
    for k, level in enumerate(skel.levels):
        win = skel.win[level]
        vals = ring[k % span][: win.size * players * nq].reshape(win.size, players, nq)
        vals[:] = 0
        if level == skel.start_level:
            vals[skel.start_rank, 0, :] = 1
        inc = skel.incoming[level]
        for which, src_level in gather_passes(inc.drop, skel.max_drop, level, live):
            pull_mod_residues(vals, live.get(src_level, empty), win, skel.dsum[level],
                              inc.ptr, inc.drop, inc.src, inc.w, unit, primes, pinv, inv, out,
                              which)
        live[level] = vals
        drop_stale(live, level, skel.max_drop)
    return np.ascontiguousarray(out.T)


def random_residues(
    space: StateSpace, skel: Skeleton, model: str, players: int, winners_only: bool,
    prime_offset: int = 0, threads: int | None = None, max_memory: int | None = None,
    planned: list[int] | None = None,
) -> tuple[np.ndarray, list[int], int]:
    """(residues, primes, check prime) of the exact sweep run in-process, block by block in
    threads.

    residues has one row per prime, in the order primes + [check prime]: the columns of
    `random_law_residues` (lengths 0 .. longest), or with `winners_only` those of
    `random_win_residues` (length mod players).  The primes are the fewest below 2**50
    whose product exceeds the denominator M (`mul_primes_exceeding`).  `planned`, if given,
    receives the forecast bytes of the blocks running at once.
    """
    primes, check_prime = mul_primes_exceeding(skel.denominator, prime_offset)
    allp = primes + [check_prime]
    check_mul_primes(allp, skel.max_indegree, weight_bound(space, skel, model))
    unit = model == "moves"
    budget = None
    if max_memory is not None:
        # what the first sweep touched may stay with the process: its forecast bounds it
        held = max(skeleton_nbytes(skel) + int(space.tab.nbytes),
                   skeleton_bytes_bound(space, model, True, threads))
        budget = int(max_memory) - held
        refuse_if_over(held, int(max_memory), f"random play at n={space.spec.n} (first sweep)")
    # per prime besides the ring: the inverse table column and the output row
    extra = 8 * (max(skel.max_weight, 1) + 1) + 8 * (skel.longest + 1 + players)
    if winners_only:
        plan = random_block_plan(allp, threads, win_words_per_prime(skel, players), extra,
                                 f"the exact win probabilities at n={space.spec.n}",
                                 None, budget)
        outs = run_blocks(plan.blocks,
                          lambda b: random_win_residues(skel, b, unit, players), plan.threads)
    else:
        plan = random_block_plan(allp, threads, law_words_per_prime(skel), extra,
                                 f"the exact length law at n={space.spec.n}",
                                 LAW_PRIMES_PER_BLOCK, budget)
        outs = run_blocks(plan.blocks, lambda b: random_law_residues(skel, b, unit),
                          plan.threads)
    if planned is not None:
        planned.append(plan.peak_bytes)
    return np.concatenate(outs, axis=0), primes, check_prime


def law_from_residues(
    residues: np.ndarray, primes: list[int], check_prime: int, denominator: int
) -> dict[int, Fraction]:
    """{length: exact probability} for the lengths of positive probability, from the rows
    of `random_law_residues` (primes + [check prime]); CRT checked by the check prime."""
    nrec = len(primes)
    lengths = [L for L in range(residues.shape[1]) if residues[:, L].any()]
    rows = [[int(x) for x in residues[:nrec, L]] for L in lengths]
    check = [int(residues[nrec, L]) for L in lengths]
    fr = reconstruct_fractions(rows, primes, check_prime, check, denominator,
                               "length probability")
    return dict(zip(lengths, fr, strict=True))


def wins_from_residues(
    residues: np.ndarray, primes: list[int], check_prime: int, denominator: int
) -> dict[int, Fraction]:
    """{r: P(length = r mod players)} from the rows of `random_win_residues`
    (primes + [check prime]); CRT checked by the check prime."""
    nrec = len(primes)
    rows = [[int(x) for x in residues[:nrec, r]] for r in range(residues.shape[1])]
    check = [int(residues[nrec, r]) for r in range(residues.shape[1])]
    fr = reconstruct_fractions(rows, primes, check_prime, check, denominator,
                               "residue probability")
    return dict(enumerate(fr))


def exact_length_distribution(
    space: StateSpace, skel: Skeleton, model: str, prime_offset: int = 0,
    threads: int | None = None,
) -> tuple[dict[int, Fraction], list[int], int]:
    """({length: exact probability} for lengths of positive probability, primes, check)."""
    residues, primes, check = random_residues(space, skel, model, 2, False, prime_offset,
                                              threads)
    return law_from_residues(residues, primes, check, skel.denominator), primes, check


def exact_win_residues(
    space: StateSpace, skel: Skeleton, model: str, players: int, prime_offset: int = 0,
    threads: int | None = None,
) -> tuple[dict[int, Fraction], list[int], int]:
    """({r: P(length = r mod players)}, primes, check) without any length window."""
    residues, primes, check = random_residues(space, skel, model, players, True, prime_offset,
                                              threads)
    return wins_from_residues(residues, primes, check, skel.denominator), primes, check


# ----------------------------------------------------------------------------- API


def winner_of_length(length: int, players: int) -> int:
    """1-based player who made the last move of a game of `length` moves (P if length 0)."""
    return (length - 1) % players + 1


def wins_from_lengths(dist: dict[int, Fraction], players: int) -> dict[int, Fraction]:
    """{player: probability of winning} from a length distribution."""
    out = {i: Fraction(0) for i in range(1, players + 1)}
    for length, pr in dist.items():
        out[winner_of_length(length, players)] += pr
    return out


@dataclass(frozen=True)
class RandomResult:
    """Exact random play at one n.

    rules / rules_hash: the rule set's name and `RuleSet.content_hash()`;
    length_probability {length: Fraction} (None on the winner-only path);
    win_probability {player (1-based): Fraction}; moments from `zeckenum.core.moments.exact_moments`
    (empty on the winner-only path); denominator = M (every probability times M is an integer).
    """

    rules: str
    rules_hash: str
    n: int
    players: int
    model: str
    win_probability: dict[int, Fraction]
    length_probability: dict[int, Fraction] | None
    moments: dict = field(default_factory=dict)
    gaussian: dict = field(default_factory=dict)
    denominator: int = 1
    primes: tuple[int, ...] = ()
    check_prime: int = 0
    states: int = 0
    transitions: int = 0
    stats: dict = field(default_factory=dict, compare=False)
    position: str = ""  # the start position (README "Positions") when not the rule set's

    @property
    def mean_length(self) -> Fraction | None:
        return self.moments.get("mean")

    @property
    def variance(self) -> Fraction | None:
        return self.moments.get("variance")

    def to_dict(self) -> dict:
        """JSON-ready form: rationals as reduced "num/den" strings, lengths/players as keys."""
        from zeckenum.core.moments import moments_to_dict

        d = {
            "rules": self.rules,
            "rules_hash": self.rules_hash,
            "n": self.n,
            **({"position": self.position} if self.position else {}),
            "players": self.players,
            "model": self.model,
            "mode": "exact",
            "no_move_convention": "a game of length 0 counts as a win for the last player",
            "win_probability": {str(k): frac_str(v) for k, v in self.win_probability.items()},
            "win_probability_decimal": {
                str(k): float(v) for k, v in self.win_probability.items()
            },
        }
        if self.length_probability is not None:
            d["length_probability"] = {
                str(k): frac_str(v) for k, v in self.length_probability.items()
            }
            d.update(moments_to_dict(self.moments))
            d["gaussian"] = self.gaussian
        d.update(
            {
                "denominator_bits": self.denominator.bit_length(),
                "states": self.states,
                "transitions": self.transitions,
                "primes": [str(p) for p in self.primes],
                "check_prime": str(self.check_prime),
                "stats": self.stats,
            }
        )
        return d


def assemble_random(
    *, rules: str, rules_hash: str, n: int, players: int, model: str, winners_only: bool,
    denominator: int, states: int, transitions: int, primes: list[int], check_prime: int,
    residues: np.ndarray, stats: dict,
) -> RandomResult:
    """The `RandomResult` of one game from its exact sweep's residues.

    residues: one row per prime, in the order primes + [check prime], with the columns of
    `random_law_residues` (lengths) or, with `winners_only`, of `random_win_residues`
    (length mod players).  The CRT rebuilds every probability times the denominator M,
    checked against the check prime (CheckPrimeMismatch); then the win probabilities, and
    for the length law its exact moments and Gaussian diagnostics.  Shared by the
    in-process path (`random_play`) and the cluster path (`zeckenum.cluster.run.run_random`),
    so both give equal results (stats aside).
    """
    from zeckenum.core.moments import exact_moments, gaussian_diagnostics

    moments: dict = {}
    gauss: dict = {}
    if winners_only:
        res = wins_from_residues(residues, primes, check_prime, denominator)
        wins = {winner_of_length(r, players): v for r, v in res.items()}
        wins = dict(sorted(wins.items()))
        dist = None
    else:
        dist = law_from_residues(residues, primes, check_prime, denominator)
        wins = wins_from_lengths(dist, players)
        moments = exact_moments(dist)
        gauss = gaussian_diagnostics({k: float(v) for k, v in dist.items()})
    return RandomResult(
        rules=rules, rules_hash=rules_hash, n=n, players=players, model=model,
        win_probability=wins,
        length_probability=dist, moments=moments, gaussian=gauss,
        denominator=denominator, primes=tuple(primes), check_prime=check_prime,
        states=states, transitions=transitions, stats=stats,
    )


def refuse_random(
    n: int, rules: str = "standard", players: int = 2, model: str = "moves", *,
    max_memory: int | None = None, threads: int | None = None,
) -> None:
    """The up-front refusals of `random_play` (`random_space`: rank table, states bound,
    first sweep forecast) without running it: the client of a sharded run calls it before
    any worker starts."""
    check_random_args(n, players, model)
    random_space(get_rules(rules).instantiate(n), model, resolve_limit(max_memory),
                 f"random play at n={n}", threads=threads)


def checked_first_sweep(
    n: int, rules: str | RuleSet, players: int, model: str, prime_offset: int,
    threads: int | None, max_memory: int | None,
) -> tuple[RuleSet, StateSpace, Skeleton, int | None, float]:
    """The start of every exact random play (windows or points): the arguments checked,
    the space refused up front under `max_memory` (`random_space`), then random play's
    first sweep.  Returns (rule set, space, skeleton, checked threads, perf_counter at the
    start)."""
    import time

    check_random_args(n, players, model)
    check_prime_offset(prime_offset)
    threads = check_threads(threads)
    rs = get_rules(rules)
    limit = resolve_limit(max_memory)
    t0 = time.perf_counter()
    space = random_space(rs.instantiate(n), model, limit, f"random play at n={n}",
                         threads=threads)
    return rs, space, random_skeleton(space, model, threads=threads), threads, t0


def random_play(
    n: int, rules: str = "standard", players: int = 2, model: str = "moves", *,
    winners_only: bool = False, prime_offset: int = 0, threads: int | None = None,
    max_memory: int | None = None,
) -> RandomResult:
    """Exact random play at n: the length distribution (unless `winners_only`) and the
    probability that each of `players` players wins, under random model `model`.

    In-process: the first sweep, then the prime blocks in threads (`random_residues`),
    then `assemble_random`.  `zeckenum.cluster.run.run_random` shards the same blocks
    across Dask workers, with checkpoints, and gives an equal result.

    Memory (`max_memory`, default what the machine has available): refused up front by
    `random_space` (rank table, then the first sweep's bound `skeleton_bytes_bound`), then
    the exact sweep's blocks are sized to what is left after the first sweep and refused
    when one prime does not fit (`random_block_plan`)."""
    import time

    rs, space, skel, threads, t0 = checked_first_sweep(n, rules, players, model, prime_offset,
                                                       threads, max_memory)
    t1 = time.perf_counter()
    first_bytes = skeleton_bytes_bound(space, model, True, threads)
    block_bytes: list[int] = []
    residues, primes, check = random_residues(space, skel, model, players, winners_only,
                                              prime_offset, threads, max_memory, block_bytes)
    # the allocator may keep what the first sweep touched: count its forecast, not the
    # skeleton's nbytes, under the exact sweep's blocks
    block_bytes = [sum(block_bytes) + max(first_bytes, skeleton_nbytes(skel))]
    stats: dict = {"first_sweep_s": round(t1 - t0, 3),
                   "forecast_peak_bytes": max(first_bytes, block_bytes[0])}
    res = assemble_random(
        rules=rs.name, rules_hash=rs.content_hash(), n=n, players=players, model=model,
        winners_only=winners_only, denominator=skel.denominator, states=skel.states,
        transitions=skel.transitions, primes=primes, check_prime=check, residues=residues,
        stats=stats,
    )
    stats["exact_sweep_s"] = round(time.perf_counter() - t1, 3)
    return res
