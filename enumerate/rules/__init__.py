"""Rule sets: the game model, its layering checks, the rule-file format and the shipped rule sets.

Nothing here knows about state spaces or sweeps; every other layer builds on it."""
