"""The shared machinery of every engine: the packed state space, the first sweep, modular
arithmetic and the CRT, memory forecasts and text formatting.

Imports only `zeckenum.rules` (and the top-level `errors`, `safeio`)."""
