"""Value checks of rule sets: every move keeps the value sum(count[k] * value[k]).

A template's value change at index k, D(k) = sum_j c_j * value(k + o_j), is checked at every
index of a finite range.  For an open range over bins from a linear recurrence of order d,
D(k) obeys the same recurrence as soon as every bin k + o_j lies past the initial values, so
D = 0 on d consecutive such indices (and every index before them) proves D = 0 for every
index: `check_values` checks exactly those.

Termination and the engine's level weights are checked per n when a rule set is instantiated
(`rules.layering`).  This module imports only `rules.model` and `errors`.
"""

from __future__ import annotations

from collections.abc import Sequence

from zeckenum.errors import InputError
from zeckenum.rules.model import MoveTemplate, RuleSet


def template_value_change(tpl: MoveTemplate, k: int, values: Sequence[int]) -> tuple[int, int]:
    """(value taken, value given) by template `tpl` at 1-based index k over `values`."""
    taken = sum(c * values[k + off - 1] for off, c in tpl.takes)
    given = sum(c * values[k + off - 1] for off, c in tpl.gives)
    return taken, given


def indices_to_check(rules: RuleSet, tpl: MoveTemplate, nbins: int | None) -> range:
    """Indices at which checking the value change proves it zero on the whole range.

    `nbins` is the number of listed bins (None for bins from a recurrence, unbounded).
    """
    offs = [off for off, _ in tpl.takes + tpl.gives]
    hi_off = max(offs)
    lo_off = min(offs)
    if nbins is not None:
        last = nbins - hi_off if tpl.last is None else tpl.last
        return range(tpl.first, last + 1)
    if tpl.last is not None:
        return range(tpl.first, tpl.last + 1)
    past_initial = len(rules.initial) + 1 - lo_off  # from here on every bin is recurrent
    return range(tpl.first, max(tpl.first, past_initial) + len(rules.recurrence) + 1)


def check_values(rules: RuleSet, where: str = "") -> None:
    """InputError (one line, naming the move and index) unless every move keeps the value."""
    listed = not rules.recurrence
    for tpl in rules.templates:
        hi_off = max(off for off, _ in tpl.takes + tpl.gives)
        ks = indices_to_check(rules, tpl, len(rules.initial) if listed else None)
        top = max(ks, default=0) + hi_off
        values = list(rules.initial) if listed else rules.bins_by_count(top)
        for k in ks:
            if k + hi_off > len(values):
                raise InputError(
                    f"{where}move {tpl.name!r} at index {k} uses bin {k + hi_off}, but only "
                    f"bins 1..{len(values)} exist"
                )
            taken, given = template_value_change(tpl, k, values)
            if taken != given:
                raise InputError(
                    f"{where}move {tpl.name!r} at index {k} changes the value: it takes "
                    f"{taken} and gives {given}"
                )
