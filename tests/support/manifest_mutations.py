"""Test helper: generated mutations of a checkpoint manifest (hypothesis strategies).

A mutation picks one place in the JSON tree (the whole document included) and replaces it
with a generated JSON value, deletes it, bumps an integer by one, or changes the last digit
of a decimal string (a prime, a denominator).  Shares no code with zeckenum.
"""

from __future__ import annotations

import copy

from hypothesis import strategies as st

_JSON_LEAVES = st.one_of(
    st.none(), st.booleans(), st.integers(min_value=-(2**70), max_value=2**70),
    st.sampled_from([0, 1, -1, 2**63, 10**30, 29, 30, 31, 54, 55]),
    st.floats(allow_nan=False), st.text(max_size=8),
    st.sampled_from(["../x", "/dev/zero", "shard-0000.npy", "4611686018427387847", ""]),
)
_JSON = st.recursive(_JSON_LEAVES, lambda kids: st.one_of(
    st.lists(kids, max_size=3), st.dictionaries(st.text(max_size=5), kids, max_size=3)),
    max_leaves=6)


def _paths(doc, prefix=()):  # noqa: ANN001, ANN202
    yield prefix
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _paths(v, (*prefix, i))


def _mutate(doc, path, action: str, value):  # noqa: ANN001, ANN202
    doc = copy.deepcopy(doc)
    if not path:
        return value
    parent = doc
    for k in path[:-1]:
        parent = parent[k]
    key = path[-1]
    if action == "delete":
        del parent[key]
    elif action == "bump" and isinstance(parent[key], int) and not isinstance(
            parent[key], bool):
        parent[key] += 1
    elif action == "digit" and isinstance(parent[key], str) and parent[key][-1:].isdigit():
        parent[key] = parent[key][:-1] + str((int(parent[key][-1]) + 2) % 10)
    else:
        parent[key] = value
    return doc


def draw_mutation(data, manifest: dict):  # noqa: ANN001, ANN201
    """One generated mutation of `manifest` (a deep copy; the original is left alone)."""
    path = data.draw(st.sampled_from(list(_paths(manifest))), label="path")
    action = data.draw(st.sampled_from(["set", "delete", "bump", "digit"]), label="action")
    value = data.draw(_JSON, label="value")
    if action == "delete" and not path:
        action = "set"
    return _mutate(manifest, path, action, value)
