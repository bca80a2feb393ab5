"""checkpoint.json text: the written layout parses back to the same document (any JSON)."""

from __future__ import annotations

import json

from hypothesis import given, settings
from hypothesis import strategies as st

from qadapt.checkpoint.format import canonical_json, document_text, identity_of

json_values = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(), st.floats(allow_nan=False,
              allow_infinity=False), st.text()),
    lambda children: st.one_of(st.lists(children, max_size=4),
                               st.dictionaries(st.text(), children, max_size=4)),
    max_leaves=25,
)


@settings(max_examples=300, deadline=None)
@given(st.dictionaries(st.text(), json_values, max_size=6))
def test_written_text_parses_back_to_the_document(document):
    text = document_text(document)
    assert text.endswith("\n")
    back = json.loads(text)
    assert back == document
    assert canonical_json(back) == canonical_json(document)
    assert identity_of(back) == identity_of(document)


def test_canonical_form_ignores_key_order_and_spacing():
    # Canonical form: sorted keys, "," and ":" separators, UTF-8 (common practice; this is
    # not RFC 8785 JCS, whose key order and number format differ).
    assert canonical_json({"b": [1, 2.5], "a": "é"}) == '{"a":"é","b":[1,2.5]}'.encode()
    assert identity_of({"b": 1, "a": 2}) == identity_of(json.loads('{ "a" : 2 , "b" : 1 }'))
