"""Testing a strategy conjecture: does a fixed policy win against every reply, for each n?

A *policy* fixes one move at every position where its player (the *policy player*, 1 or 2)
is to move: a policy file (`optimal.policyfile`, compiled to arrays and run in the kernel
`choose_policy_moves`) or a Python function (a *hook*, `hook_choices`, run outside the
kernels).  Two players, normal play (the last player to move wins).

AND-OR evaluation.  Over the whole game DAG of one n, with global state ids (level offset
plus rank, as in `strategy.move_graph`), two numbers per state:

    lose_me[s]  the policy player is to move at s
    lose_op[s]  the opponent is to move at s

each -1 when the policy player, following the policy from there, wins against every reply,
and otherwise the fewest moves in which the opponent forces the policy player's defeat
(the length of the shortest refuting line):

    lose_me[s] = 0 if s has no move (the policy player cannot move: lost),
                 else lose_op[t] + 1 for the policy's move s -> t (-1 if lose_op[t] = -1)
    lose_op[s] = -1 if s has no move (the policy player moved last: won),
                 else 1 + min over moves s -> t with lose_me[t] >= 0 of lose_me[t]
                 (-1 when every move leads to a t with lose_me[t] = -1)

The layers are swept upward (level 0 first; inside a layer in descending rank, as in
`classify`), so every successor is final before it is read (`evaluate_policy_layer`).  The
policy wins at n when lose(start, side to move first) = -1; else the refuting line is read
off the arrays from the start (`refuting_line`): the policy's moves, and at each opponent
turn the first move (in the rule set's move order) that keeps the distance shrinking by one.

Winning-move fraction.  The positions counted are those where the policy player is to move,
that have at least one move, and that can be reached from the start when the policy player
follows the policy and the opponent plays any legal moves (a downward sweep over (state,
side to move) pairs, `reach_policy_layer`).  At each, the policy's move is a *winning move*
when it leads to a P-position of the game (classes from `solve.solve(keep_classes=True)`,
i.e. `classify`).  Reported: the number of such positions, how many of them are
N-positions (where a winning move exists), and at how many the policy's move wins.

Memory: the rank table, one class byte and bit per state (`solve`), lose_me and lose_op
(int32) and the policy's move (int16) per state, plus the largest layer's move listing
(`policy_bytes`), plus the solve that keeps the classes (`solve.solve_bytes`); refused up
front when over the limit.
"""

from __future__ import annotations

import importlib.util
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from zeckenum.core.checks import check_n
from zeckenum.core.jit import kernel
from zeckenum.core.listing import LayerMoves, moves_out
from zeckenum.core.memory import refuse_if_over, resolve_limit
from zeckenum.core.statespace import StateSpace, build_space, rank_table_bytes, refuse_space
from zeckenum.errors import InputError
from zeckenum.optimal.policyfile import CompiledPolicy, Policy, compile_policy, read_policy
from zeckenum.optimal.solve import needs_reach, solve, solve_bytes
from zeckenum.rules.catalogue import get_rules
from zeckenum.rules.model import GameSpec, RuleSet
from zeckenum.rules.notation import format_position

Hook = Callable[[tuple[int, ...], list[tuple[str, tuple[int, ...]]]], object]
"""A Python policy: choose(position, moves) -> index into moves or a move name."""


# ----------------------------------------------------------------------------- kernels


@kernel(inline=True)
def _holds(c: np.ndarray, k: int, j: int, cterm: np.ndarray, crel: np.ndarray,
           cbin: np.ndarray, cop: np.ndarray, cval: np.ndarray) -> bool:
    """Whether condition row j holds at the count vector c for a candidate at bin k
    (1-based)."""
    t = cterm[j]
    if t == 0:
        b = cbin[j] + k if crel[j] == 1 else cbin[j]
        x = c[b - 1] if 1 <= b <= c.size else 0
    elif t == 1:
        x = 0
        for q in range(c.size):
            x += c[q]
    else:
        x = 0
        for q in range(c.size - 1, -1, -1):
            if c[q] > 0:
                x = q + 1
                break
    op = cop[j]
    v = cval[j]
    if op == 0:
        return x >= v
    if op == 1:
        return x <= v
    if op == 2:
        return x == v
    if op == 3:
        return x != v
    if op == 4:
        return x > v
    if op == 5:
        return x < v
    if op == 6:
        return x % 2 == 0
    return x % 2 == 1


@kernel
def choose_policy_moves(
    states: np.ndarray, ptr: np.ndarray, move: np.ndarray, move_k: np.ndarray,
    rank: np.ndarray, highest: np.ndarray, cptr: np.ndarray, cterm: np.ndarray,
    crel: np.ndarray, cbin: np.ndarray, cop: np.ndarray, cval: np.ndarray,
) -> tuple[np.ndarray, int]:
    """The policy's move at every state of one listed layer; (choice, fallbacks).

    choice[i] is the offset, inside state i's row ptr[i]..ptr[i+1]-1, of the move the
    policy plays (-1 for a state without moves).  The preferences are tried in order
    (`policyfile` docstring): the first with a candidate decides (highest or lowest k, then
    the lowest rank); else the fallback, the row's first move (lowest move index).
    `fallbacks` counts the states decided by the fallback.
    """
    size = states.shape[0]
    npref = rank.shape[0]
    choice = np.full(size, -1, dtype=np.int64)
    fallbacks = 0
    for i in range(size):
        a = ptr[i]
        b = ptr[i + 1]
        if a == b:
            continue
        c = states[i]
        best = -1
        for p in range(npref):
            bk = 0
            br = 0
            for e in range(a, b):
                m = move[e]
                r = rank[p, m]
                if r < 0:
                    continue
                k = move_k[m]
                ok = True
                for j in range(cptr[p], cptr[p + 1]):
                    if not _holds(c, k, j, cterm, crel, cbin, cop, cval):
                        ok = False
                        break
                if not ok:
                    continue
                if best < 0:
                    better = True
                elif k != bk:
                    better = (k > bk) == (highest[p] == 1)
                else:
                    better = r < br
                if better:
                    best = e - a
                    bk = k
                    br = r
            if best >= 0:
                break
        if best < 0:
            best = 0
            fallbacks += 1
        choice[i] = best
    return choice, fallbacks


@kernel
def evaluate_policy_layer(
    off: int, ptr: np.ndarray, drop: np.ndarray, other: np.ndarray, move: np.ndarray,
    choice: np.ndarray, lv_off: np.ndarray, lose_me: np.ndarray, lose_op: np.ndarray,
    chosen: np.ndarray,
) -> None:
    """lose_me / lose_op (module docstring) of every state of one listed layer, and the
    policy's move index `chosen` (-1 without moves), in global ids off + rank.

    The layer is visited in descending rank; a move of drop d leads to global id
    lv_off[d] + other[e]; the layers below are final (upward sweep).
    """
    size = ptr.shape[0] - 1
    for i in range(size - 1, -1, -1):
        u = off + i
        a = ptr[i]
        b = ptr[i + 1]
        if a == b:
            lose_me[u] = 0
            lose_op[u] = -1
            chosen[u] = -1
            continue
        e = a + choice[i]
        chosen[u] = move[e]
        t = lv_off[drop[e]] + other[e]
        lose_me[u] = -1 if lose_op[t] < 0 else lose_op[t] + 1
        best = -1
        for e in range(a, b):
            t = lv_off[drop[e]] + other[e]
            x = lose_me[t]
            if x >= 0 and (best < 0 or x < best):
                best = x
        lose_op[u] = -1 if best < 0 else best + 1


@kernel
def reach_policy_layer(
    off: int, ptr: np.ndarray, drop: np.ndarray, other: np.ndarray, move: np.ndarray,
    lv_off: np.ndarray, chosen: np.ndarray, is_n: np.ndarray, reach: np.ndarray,
) -> tuple[int, int, int]:
    """Push (state, side to move) reachability under the policy through one listed layer;
    returns (policy positions, of which N-positions, winning choices) of this layer.

    reach[u] bit 0: reached with the policy player to move, bit 1: with the opponent to
    move.  The layer is visited in ascending rank (moves inside a layer raise the rank), so
    its own bits are final before they are read.  At a bit-0 state with moves the policy's
    move is pushed (and counted: winning when it leads to a P-position, is_n False); at a
    bit-1 state every move is pushed.
    """
    size = ptr.shape[0] - 1
    positions = 0
    n_pos = 0
    good = 0
    for i in range(size):
        u = off + i
        f = reach[u]
        if f == 0:
            continue
        a = ptr[i]
        b = ptr[i + 1]
        if a == b:
            continue
        if f & 1:
            for e in range(a, b):
                if move[e] == chosen[u]:
                    t = lv_off[drop[e]] + other[e]
                    reach[t] |= np.uint8(2)
                    positions += 1
                    if is_n[u]:
                        n_pos += 1
                    if not is_n[t]:
                        good += 1
                    break
        if f & 2:
            for e in range(a, b):
                t = lv_off[drop[e]] + other[e]
                reach[t] |= np.uint8(1)
    return positions, n_pos, good


# ----------------------------------------------------------------------------- results


@dataclass(frozen=True)
class RefutingStep:
    """One move of a refuting line: who moved (1 or 2), the move, the position after."""

    player: int
    move: str
    after: tuple[int, ...]

    def to_dict(self) -> dict:
        return {"player": self.player, "move": self.move,
                "position": format_position(self.after)}


@dataclass(frozen=True)
class PolicyRow:
    """The verdict at one n.

    wins              the policy player wins against every reply
    refutation        the shortest refuting line (moves from the start) when not, else ()
    positions         policy positions counted (module docstring: reachable under the
                      policy, policy player to move, at least one move)
    n_positions       how many of them are N-positions
    winning_choices   at how many the policy's move leads to a P-position
    fallbacks         states of the game (all, reachable or not) where no preference of a
                      policy file applied (0 for a hook)
    winnable          the policy player wins the game under optimal play (when False, every
                      policy fails at this n)
    forecast_peak_bytes   the memory forecast the run was checked against (`policy_bytes`
                      plus `solve.solve_bytes` of the classification it keeps)
    """

    n: int
    wins: bool
    states: int
    refutation: tuple[RefutingStep, ...]
    positions: int
    n_positions: int
    winning_choices: int
    fallbacks: int
    start: tuple[int, ...] = ()
    winnable: bool = True
    forecast_peak_bytes: int = 0

    @property
    def fraction(self) -> float | None:
        return self.winning_choices / self.positions if self.positions else None

    def to_dict(self) -> dict:
        return {
            "n": self.n, "policy_wins": self.wins, "states": self.states,
            "refutation_length": len(self.refutation) if not self.wins else None,
            "refutation": [s.to_dict() for s in self.refutation] if not self.wins else None,
            "policy_positions": self.positions, "n_positions": self.n_positions,
            "winning_choices": self.winning_choices,
            "winning_fraction": None if self.fraction is None else round(self.fraction, 6),
            "fallback_states": self.fallbacks,
            "player_wins_optimally": self.winnable,
            "forecast_peak_bytes": self.forecast_peak_bytes,
        }


@dataclass(frozen=True)
class PolicyReport:
    """The verdicts of one policy for the policy player over a range of n."""

    policy: str
    rules: str
    rules_hash: str
    player: int
    rows: tuple[PolicyRow, ...]
    seconds: float
    stats: dict = field(default_factory=dict)

    @property
    def first_failure(self) -> PolicyRow | None:
        return next((r for r in self.rows if not r.wins), None)

    def to_dict(self) -> dict:
        first = self.first_failure
        return {
            "policy": self.policy, "rules": self.rules, "rules_hash": self.rules_hash,
            "player": self.player, "from": self.rows[0].n if self.rows else None,
            "to": self.rows[-1].n if self.rows else None,
            "first_failure": None if first is None else first.n,
            "first_refutation": None if first is None else
            [s.to_dict() for s in first.refutation],
            "rows": [r.to_dict() for r in self.rows],
            "seconds": round(self.seconds, 3),
            "stats": self.stats,
        }


# ----------------------------------------------------------------------------- policies


def load_hook(target: str) -> tuple[str, Hook]:
    """(name, function) of a Python policy `path.py` or `path.py:function` (default
    function `choose`); InputError (one line) when it cannot be loaded."""
    path, sep, func = target.rpartition(":")
    if not sep or not path.endswith(".py"):
        path, func = target, "choose"
    p = Path(path)
    if not p.is_file():
        raise InputError(f"policy hook {path!r}: no such Python file")
    name = f"zeckenum_policy_hook_{abs(hash(str(p.resolve())))}"
    spec = importlib.util.spec_from_file_location(name, p)
    if spec is None or spec.loader is None:
        raise InputError(f"policy hook {path!r}: cannot be loaded as a Python module")
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    try:
        spec.loader.exec_module(module)
    except Exception as exc:  # noqa: BLE001 - user code: reported as one line
        sys.modules.pop(name, None)
        raise InputError(f"policy hook {path!r} failed to import: "
                         f"{exc.__class__.__name__}: {str(exc)[:160]}") from None
    fn = getattr(module, func, None)
    if not callable(fn):
        raise InputError(f"policy hook {path!r} has no function {func!r}")
    return f"{p.name}:{func}", fn


def hook_choices(lm: LayerMoves, spec: GameSpec, hook: Hook) -> np.ndarray:
    """The hook's move at every state of one listed layer, as row offsets (-1 without
    moves), calling hook(position, moves) once per state with a move (outside kernels).

    position: the count vector, a tuple of ints over all the game's bins, bin 1 first;
    moves: [(move name, position after the move)] in the rule set's move order.  The hook
    returns an index into moves (an int) or a move name among them; anything else, or an
    exception, is refused with one line (InputError).
    """
    choice = np.full(lm.size, -1, dtype=np.int64)
    for i in range(lm.size):
        a, b = int(lm.ptr[i]), int(lm.ptr[i + 1])
        if a == b:
            continue
        c = lm.states[i]
        pos = tuple(int(x) for x in c)
        opts = []
        for e in range(a, b):
            m = int(lm.move[e])
            nxt = c.copy()
            for bb, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
                nxt[bb] += d
            opts.append((spec.move_names[m], tuple(int(x) for x in nxt)))
        try:
            got = hook(pos, list(opts))
        except Exception as exc:  # noqa: BLE001 - user code: reported as one line
            raise InputError(f"policy hook raised {exc.__class__.__name__} at position "
                             f"{format_position(pos)}: {str(exc)[:120]}") from None
        if isinstance(got, str):
            names = [o[0] for o in opts]
            if got not in names:
                raise InputError(f"policy hook chose {got[:40]!r} at position "
                                 f"{format_position(pos)}, which is not a legal move there")
            choice[i] = names.index(got)
        elif isinstance(got, (int, np.integer)) and not isinstance(got, bool) \
                and 0 <= int(got) < len(opts):
            choice[i] = int(got)
        else:
            raise InputError(f"policy hook returned {str(got)[:40]!r} at position "
                             f"{format_position(pos)}: expected an index 0..{len(opts) - 1} "
                             "or a move name")
    return choice


# ----------------------------------------------------------------------------- one n


def policy_bytes(space: StateSpace) -> int:
    """Forecast peak bytes of `policy_row` beyond `solve`'s own forecast: per state the
    class byte and bit (`solve(keep_classes=True)`), int32 lose_me and lose_op, int16
    policy move, uint8 reach flags (12 bytes and a bit); the rank table; and two listings
    of the largest layer (count vectors, row pointers, D, choices: 8 bytes per bin and 24
    per state; 21 bytes per listed move): the previous layer's listing is still held while
    the next one is built."""
    per_state = space.spec.nbins * 8 + 24
    return (int(rank_table_bytes(space.spec.nbins, space.spec.n, space.top))
            + space.total_states() * 13
            + 2 * space.listing_peak(per_state, 21, sign=+1))


def _global_offsets(space: StateSpace) -> tuple[dict[int, int], int]:
    offset, total = {}, 0
    for lv in range(space.top + 1):
        if space.layer_size(lv) > 0:
            offset[lv] = total
            total += space.layer_size(lv)
    return offset, total


def _lv_off(space: StateSpace, offset: dict[int, int], level: int) -> np.ndarray:
    return np.array([offset.get(level - d, 0) for d in range(space.max_drop + 1)],
                    dtype=np.int64)


def policy_row(
    n: int, rules: RuleSet, player: int, *, policy: Policy | None = None,
    hook: Hook | None = None, max_memory: int | None = None, threads: int | None = 1,
) -> PolicyRow:
    """The verdict of a policy file (`policy`) or a Python `hook` at n (module docstring)."""
    check_n(n)
    if player not in (1, 2):
        raise InputError(f"the policy player must be 1 or 2, got {player}")
    if (policy is None) == (hook is None):
        raise InputError("give exactly one of a policy file and a Python hook")
    spec = rules.instantiate(n)
    limit = resolve_limit(max_memory)
    what = f"testing a policy at n={n}"
    refuse_space(spec, limit, what, per_state=14.0)
    space = build_space(spec, limit)
    forecast = policy_bytes(space) + solve_bytes(space, 2, needs_reach(rules), True,
                                                 threads or 1)
    refuse_if_over(forecast, limit, what)
    res = solve(n, rules, 2, keep_classes=True, max_memory=max_memory, threads=threads)
    offset, total = _global_offsets(space)
    is_n = np.zeros(total, dtype=np.bool_)
    for lv, arr in (res.classes or {}).items():
        if lv in offset:
            is_n[offset[lv]: offset[lv] + arr.size] = arr
    lose_me = np.zeros(total, dtype=np.int32)
    lose_op = np.zeros(total, dtype=np.int32)
    chosen = np.full(total, -1, dtype=np.int16)
    comp: CompiledPolicy | None = compile_policy(policy, spec) if policy is not None else None
    fallbacks = 0
    levels = sorted(offset)
    for lv in levels:
        lm = moves_out(space, lv)
        if comp is not None:
            choice, fb = choose_policy_moves(
                lm.states, lm.ptr, lm.move, comp.move_k, comp.rank, comp.highest, comp.cptr,
                comp.cterm, comp.crel, comp.cbin, comp.cop, comp.cval)
            fallbacks += int(fb)
        else:
            choice = hook_choices(lm, spec, hook)
        evaluate_policy_layer(offset[lv], lm.ptr, lm.drop, lm.other, lm.move, choice,
                              _lv_off(space, offset, lv), lose_me, lose_op, chosen)
    s_level, s_rank = space.rank(spec.start)
    start = offset[s_level] + s_rank
    me_first = player == 1
    verdict = int(lose_me[start] if me_first else lose_op[start])
    reach = np.zeros(total, dtype=np.uint8)
    reach[start] = 1 if me_first else 2
    positions = n_pos = good = 0
    for lv in reversed(levels):
        lm = moves_out(space, lv)
        p, q, g = reach_policy_layer(offset[lv], lm.ptr, lm.drop, lm.other, lm.move,
                                     _lv_off(space, offset, lv), chosen, is_n, reach)
        positions, n_pos, good = positions + int(p), n_pos + int(q), good + int(g)
    line: tuple[RefutingStep, ...] = ()
    if verdict >= 0:
        line = refuting_line(space, offset, start, me_first, player, lose_me, lose_op,
                             chosen)
        if len(line) != verdict:
            raise RuntimeError("refuting line disagrees with its length")
    return PolicyRow(n=n, wins=verdict < 0, states=res.states, refutation=line,
                     positions=positions, n_positions=n_pos, winning_choices=good,
                     fallbacks=fallbacks, start=tuple(int(x) for x in spec.start),
                     winnable=res.winner == player, forecast_peak_bytes=forecast)


def refuting_line(space: StateSpace, offset: dict[int, int], start: int, me_first: bool,
                  player: int, lose_me: np.ndarray, lose_op: np.ndarray,
                  chosen: np.ndarray) -> tuple[RefutingStep, ...]:
    """The shortest refuting line from the start (module docstring): the policy's moves and
    the opponent's first move, in the rule set's order, that shortens the distance by one."""
    spec = space.spec
    c = spec.start.copy()
    u, me = start, me_first
    steps: list[RefutingStep] = []

    def gid(x: np.ndarray) -> int:
        lv, rk = space.rank(x)
        return offset[lv] + rk

    def apply(x: np.ndarray, m: int) -> np.ndarray | None:
        y = x.copy()
        for b, d in zip(spec.mv_bins[m], spec.mv_delta[m], strict=True):
            y[b] += d
        return y if (y >= 0).all() else None

    while True:
        if me:
            m = int(chosen[u])
            if m < 0:
                break
            nxt = apply(c, m)
            who = player
        else:
            want = int(lose_op[u]) - 1
            nxt, m = None, -1
            for mm in range(spec.mv_bins.shape[0]):
                y = apply(c, mm)
                if y is not None and int(lose_me[gid(y)]) == want:
                    nxt, m = y, mm
                    break
            if nxt is None:
                break
            who = 3 - player
        steps.append(RefutingStep(who, spec.move_names[m], tuple(int(x) for x in nxt)))
        c, u, me = nxt, gid(nxt), not me
    return tuple(steps)


def policy_verdicts(
    target: str | Path | Policy, lo: int, hi: int, rules: str | RuleSet = "standard",
    player: int = 2, *, max_memory: int | None = None, threads: int | None = 1,
    on_row: Callable[[PolicyRow], None] | None = None,
) -> PolicyReport:
    """The verdicts of a policy for lo <= n <= hi: `target` is a parsed `Policy`, a policy
    file (.toml), or a Python hook `file.py` / `file.py:function` (`load_hook`)."""
    if lo < 1 or hi < lo:
        raise InputError(f"need 1 <= FROM <= TO for the range of n, got {lo}..{hi}")
    check_n(hi)
    rs = get_rules(rules)
    policy: Policy | None = None
    hook: Hook | None = None
    if isinstance(target, Policy):
        policy, name = target, target.name
    elif str(target).endswith(".py") or ".py:" in str(target):
        name, hook = load_hook(str(target))
    else:
        policy = read_policy(target)
        name = policy.name
    t0 = time.perf_counter()
    rows = []
    for n in range(lo, hi + 1):
        row = policy_row(n, rs, player, policy=policy, hook=hook, max_memory=max_memory,
                         threads=threads)
        rows.append(row)
        if on_row is not None:
            on_row(row)
    return PolicyReport(policy=name, rules=rs.name, rules_hash=rs.content_hash(),
                        player=player, rows=tuple(rows), seconds=time.perf_counter() - t0,
                        stats={"kind": "file" if policy is not None else "hook"})
