"""Rule sets: the game model, its layering, the rule-file format, value checks, the catalogue
of shipped rule sets (rulesets/*.toml) and the lookup by name.

Modules, each importing only those before it (and the top-level `errors`, `safeio`):
`layering` (level weights and the termination proof for one n), `notation` (the one
position notation: parse, format, annotate), `model` (MoveTemplate,
RuleSet, GameSpec, STANDARD), `validate` (every move keeps the value), `rulefile` (the TOML
format), `catalogue` (BUILTIN, get_rules).  Nothing here knows about state spaces or sweeps;
every other layer builds on it."""
