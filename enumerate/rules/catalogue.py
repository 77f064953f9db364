"""The shipped rule sets and the lookup of a rule set by name or file.

`BUILTIN` holds every rule file of `rulesets/*.toml` (package data) by name, with "standard"
being `model.STANDARD` itself (its file must describe the same game: same content hash).
`get_rules` is the one entry point every command and engine uses to turn a name, a path or a
`RuleSet` into a `RuleSet`.  This module imports `model` and `rulefile`; neither imports it.
"""

from __future__ import annotations

from pathlib import Path

from zeckenum.errors import InputError
from zeckenum.rules.model import STANDARD, RuleSet
from zeckenum.rules.rulefile import read_rule_file

RULESETS_DIR = Path(__file__).with_name("rulesets")
"""Where the shipped rule files live (package data)."""


def _load_builtin() -> dict[str, RuleSet]:
    """The shipped rule sets by name; "standard" is `STANDARD` itself (same content)."""
    out: dict[str, RuleSet] = {STANDARD.name: STANDARD}
    for path in sorted(RULESETS_DIR.glob("*.toml")):
        rs = read_rule_file(path)
        if rs.name == STANDARD.name:
            if rs.content_hash() != STANDARD.content_hash():
                raise RuntimeError(f"{path} does not describe the standard game")
            continue
        out[rs.name] = rs
    return out


BUILTIN: dict[str, RuleSet] = _load_builtin()


def get_rules(name_or_rules: str | Path | RuleSet) -> RuleSet:
    """A RuleSet passed through, a built-in rule set by name, or a rule file (*.toml) read
    and validated (`rulefile.read_rule_file`)."""
    if isinstance(name_or_rules, RuleSet):
        return name_or_rules
    if isinstance(name_or_rules, Path) or (
        isinstance(name_or_rules, str) and name_or_rules.endswith(".toml")
    ):
        return read_rule_file(Path(name_or_rules))
    if not isinstance(name_or_rules, str):
        raise InputError(f"rules must be a name, a .toml path or a RuleSet, got {name_or_rules!r}")
    try:
        return BUILTIN[name_or_rules]
    except KeyError:
        known = ", ".join(sorted(BUILTIN))
        raise InputError(
            f"unknown rule set {name_or_rules!r} (built-in: {known}; or give a .toml file)"
        ) from None
