"""Property-based tests (hypothesis) of manifest parsing: any corruption of a valid manifest
is either accepted, and then round-trips unchanged, or rejected with BadInput; never any other
exception."""

from __future__ import annotations

import copy
import json

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from qadapt.data.format.manifest import decode_manifest_text, example_manifest_json, parse_manifest
from qadapt.errors import BadInput

JSON_LEAVES = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(2**70), max_value=2**70),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=12),
)
JSON_VALUES = st.recursive(
    JSON_LEAVES,
    lambda children: st.one_of(
        st.lists(children, max_size=4),
        st.dictionaries(st.text(max_size=8), children, max_size=4),
    ),
    max_leaves=8,
)


def _paths(value, prefix=()):
    """Every path (tuple of keys/indices) into a nested JSON value, the root included."""
    yield prefix
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _paths(item, (*prefix, key))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            yield from _paths(item, (*prefix, index))


BASE = example_manifest_json()
ALL_PATHS = list(_paths(BASE))


def _apply(manifest, path, action, value):
    if not path:
        return value if action == "replace" else manifest
    parent = manifest
    for key in path[:-1]:
        parent = parent[key]
    last = path[-1]
    if action == "replace":
        parent[last] = value
    elif action == "delete":
        del parent[last]
    elif action == "add" and isinstance(parent, dict):
        parent[f"extra_{len(parent)}"] = value
    elif action == "add" and isinstance(parent, list):
        parent.append(value)
    return manifest


def _check(candidate):
    try:
        parsed = parse_manifest(candidate)
    except BadInput:
        return None
    # Accepted: the parsed manifest must describe exactly the input.
    assert parsed.to_json() == candidate
    return parsed


def test_the_example_manifest_is_valid():
    assert parse_manifest(copy.deepcopy(BASE)).to_json() == BASE


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    path=st.sampled_from(ALL_PATHS),
    action=st.sampled_from(["replace", "delete", "add"]),
    value=JSON_VALUES,
)
def test_single_corruptions_are_accepted_identically_or_rejected(path, action, value):
    candidate = _apply(copy.deepcopy(BASE), path, action, value)
    _check(candidate)


@settings(max_examples=150, deadline=None)
@given(
    edits=st.lists(
        st.tuples(
            st.sampled_from(ALL_PATHS), st.sampled_from(["replace", "delete", "add"]), JSON_VALUES
        ),
        min_size=2,
        max_size=5,
    )
)
def test_several_corruptions_are_accepted_identically_or_rejected(edits):
    candidate = copy.deepcopy(BASE)
    for path, action, value in edits:
        try:
            candidate = _apply(candidate, path, action, value)
        except (KeyError, IndexError, TypeError):
            continue  # an earlier edit removed or replaced what this path points into
    _check(candidate)


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=200) | st.text(max_size=200))
def test_arbitrary_bytes_never_raise_anything_but_bad_input(blob):
    text = blob.decode("utf-8", "replace") if isinstance(blob, bytes) else blob
    try:
        decoded = decode_manifest_text(text, where="m")
    except BadInput:
        return
    _check(decoded)


@settings(max_examples=100, deadline=None)
@given(st.integers(min_value=-3, max_value=10**6).filter(lambda n: n != 3))
def test_a_wrong_transition_count_is_always_rejected(count):
    candidate = copy.deepcopy(BASE)
    candidate["transition_count"] = count
    with pytest.raises(BadInput):
        parse_manifest(candidate)


@settings(max_examples=100, deadline=None)
@given(st.text(min_size=1, max_size=30))
def test_file_names_with_separators_are_always_rejected(name):
    candidate = copy.deepcopy(BASE)
    candidate["fields"]["rewards"]["file"] = f"{name}/../{name}.npy"
    with pytest.raises(BadInput, match="plain file name"):
        parse_manifest(candidate)


def test_manifest_text_round_trips_through_strict_json():
    text = json.dumps(BASE, allow_nan=False)
    assert parse_manifest(decode_manifest_text(text, where="m")).to_json() == BASE
