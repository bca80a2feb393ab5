"""pack_state / unpack_state: exact round trips (property-based) and refusals.

The round trip goes through real safetensors bytes and strict JSON text, as a checkpoint does.
"""

from __future__ import annotations

import json
import math
import struct
from collections import OrderedDict

import numpy as np
import pytest
import torch
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from safetensors.torch import load as load_safetensors_bytes
from safetensors.torch import save as save_safetensors_bytes

from qadapt.checkpoint import pack_state, unpack_state
from qadapt.checkpoint.state_packing import skeleton_from_text, skeleton_to_text
from qadapt.errors import BadInput


# -- exact comparison ------------------------------------------------------------------------
def _tensor_bytes(t: torch.Tensor) -> bytes:
    flat = t.detach().resolve_conj().resolve_neg().contiguous().reshape(-1)
    return flat.view(torch.uint8).numpy().tobytes() if flat.numel() else b""


def assert_identical(a, b, path="root"):
    """Same Python types all the way down, same key order, bit-identical numbers."""
    assert type(a) is type(b), f"{path}: {type(a)} vs {type(b)}"
    if isinstance(a, torch.Tensor):
        assert a.dtype == b.dtype and a.shape == b.shape, path
        assert _tensor_bytes(a) == _tensor_bytes(b), path
    elif isinstance(a, np.ndarray):
        assert a.dtype == b.dtype and a.shape == b.shape, path
        assert a.tobytes() == b.tobytes(), path
    elif isinstance(a, np.generic):
        assert a.dtype == b.dtype and a.tobytes() == b.tobytes(), path
    elif isinstance(a, float):
        assert struct.pack("<d", a) == struct.pack("<d", b), f"{path}: {a!r} vs {b!r}"
    elif isinstance(a, dict):
        assert [(type(k), k) for k in a] == [(type(k), k) for k in b], path
        for key in a:
            assert_identical(a[key], b[key], f"{path}/{key}")
    elif isinstance(a, list | tuple):
        assert len(a) == len(b), path
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            assert_identical(x, y, f"{path}/{i}")
    else:
        assert a == b, path


def round_trip(obj):
    """pack -> safetensors bytes + JSON text -> unpack."""
    tensors, skeleton = pack_state(obj)
    text = skeleton_to_text(skeleton)  # strict JSON: raises on NaN tokens
    data = save_safetensors_bytes(dict(sorted(tensors.items())), metadata={"layout": text})
    return unpack_state(load_safetensors_bytes(data), skeleton_from_text(text))


# -- strategies ------------------------------------------------------------------------------
_NUMPY_DTYPES = ["<f4", "<f8", "<f2", ">f4", "<i8", "<i4", "<i2", "|i1", "|u1", "<u2", "<u4",
                 "<u8", "<c8", "<c16"]
_TORCH_DTYPES = [torch.float32, torch.float64, torch.float16, torch.bfloat16, torch.int64,
                 torch.int32, torch.int16, torch.int8, torch.uint8, torch.complex64,
                 torch.complex128]
_shapes = st.lists(st.integers(0, 3), min_size=0, max_size=3).map(tuple)


@st.composite
def numpy_arrays(draw):
    """Arbitrary bit patterns (NaN payloads included) or booleans, any small shape."""
    shape = draw(_shapes)
    count = math.prod(shape)
    kind = draw(st.sampled_from([*_NUMPY_DTYPES, "|b1"]))
    dtype = np.dtype(kind)
    if kind == "|b1":
        return np.array(draw(st.lists(st.booleans(), min_size=count, max_size=count)),
                        dtype=bool).reshape(shape)
    raw = draw(st.binary(min_size=count * dtype.itemsize, max_size=count * dtype.itemsize))
    array = np.frombuffer(raw, dtype=dtype).reshape(shape).copy()
    if draw(st.booleans()) and array.ndim >= 2:
        array = array.T  # non-contiguous input
    return array


@st.composite
def torch_tensors(draw):
    shape = draw(_shapes)
    count = math.prod(shape)
    dtype = draw(st.sampled_from([*_TORCH_DTYPES, torch.bool]))
    if dtype == torch.bool:
        values = draw(st.lists(st.booleans(), min_size=count, max_size=count))
        return torch.tensor(values, dtype=torch.bool).reshape(shape)
    size = torch.empty((), dtype=dtype).element_size()
    if count == 0:
        return torch.empty(shape, dtype=dtype)
    raw = draw(st.binary(min_size=count * size, max_size=count * size))
    flat = torch.frombuffer(bytearray(raw), dtype=torch.uint8).view(dtype)
    return flat.reshape(shape).clone()


any_float = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(0, 2**64 - 1).map(lambda b: struct.unpack("<d", struct.pack("<Q", b))[0]),
)
any_int = st.one_of(st.integers(), st.integers(-(2**300), 2**300), st.sampled_from(
    [2**53, 2**53 + 1, -(2**53) - 1, 2**64, -(2**127)]))
numpy_scalars = st.one_of(
    any_float.map(np.float64),
    st.integers(0, 2**32 - 1).map(lambda b: np.array(b, np.uint32).view(np.float32)[()]),
    st.integers(-(2**63), 2**63 - 1).map(
        np.int64), st.integers(0, 255).map(np.uint8), st.booleans().map(np.bool_),
    st.tuples(any_float, any_float).map(lambda p: np.complex128(complex(*p))),
)
leaves = st.one_of(
    st.none(), st.booleans(), any_int, any_float, st.text(max_size=8), numpy_scalars,
    numpy_arrays(), torch_tensors(),
)
keys = st.one_of(st.text(max_size=6), any_int)


def _containers(children):
    return st.one_of(
        st.lists(children, max_size=4),
        st.lists(children, max_size=4).map(tuple),
        st.dictionaries(keys, children, max_size=4),
        st.dictionaries(keys, children, max_size=4).map(lambda d: OrderedDict(d)),
    )


states = st.recursive(leaves, _containers, max_leaves=20)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(states)
def test_any_state_round_trips_exactly(state):
    assert_identical(state, round_trip(state))


@settings(max_examples=60, deadline=None)
@given(states)
def test_skeleton_is_strict_json_and_packing_is_deterministic(state):
    tensors_a, skeleton_a = pack_state(state)
    tensors_b, skeleton_b = pack_state(state)
    assert json.dumps(skeleton_a, allow_nan=False) == json.dumps(skeleton_b, allow_nan=False)
    assert list(tensors_a) == list(tensors_b)
    for name in tensors_a:
        assert _tensor_bytes(tensors_a[name]) == _tensor_bytes(tensors_b[name])


@settings(max_examples=200, deadline=None)
@given(st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(), st.floats(allow_nan=False),
              st.text(max_size=5)),
    lambda c: st.one_of(st.lists(c, max_size=3), st.dictionaries(
        st.sampled_from(["list", "tuple", "dict", "int", "float_bits", "tensor", "array",
                         "numpy_scalar", "dtype", "shape", "bytes", "x"]), c, max_size=3)),
    max_leaves=12,
))
def test_malformed_layouts_raise_bad_input_only(skeleton):
    """Whatever a corrupt file holds, unpacking fails with BadInput (or succeeds), never with
    another exception."""
    tensors = {"t": torch.zeros(2)}
    try:
        unpack_state(tensors, skeleton)
    except BadInput:
        pass


# -- the shapes real states take --------------------------------------------------------------
def test_adam_state_dict_keeps_int_keys_tuples_and_none():
    net = torch.nn.Linear(3, 2)
    optimizer = torch.optim.Adam(net.parameters(), lr=1e-3)
    net(torch.ones(4, 3)).sum().backward()
    optimizer.step()
    state = optimizer.state_dict()
    back = round_trip(state)
    assert_identical(state, back)
    assert list(back["state"]) == [0, 1]
    assert back["param_groups"][0]["betas"] == (0.9, 0.999)
    fresh = torch.optim.Adam(torch.nn.Linear(3, 2).parameters(), lr=1e-3)
    fresh.load_state_dict(back)  # torch accepts what came back


def test_module_state_dict_stays_an_ordered_dict():
    state = torch.nn.Sequential(torch.nn.Linear(2, 2), torch.nn.LayerNorm(2)).state_dict()
    back = round_trip(state)
    assert type(back) is OrderedDict
    assert_identical(OrderedDict(state), back)


@pytest.mark.parametrize("make", [np.random.PCG64, np.random.MT19937, np.random.SFC64,
                                  np.random.Philox])
def test_numpy_generator_states_resume_the_same_stream(make):
    generator = np.random.Generator(make(2024))
    generator.random(17)
    state = generator.bit_generator.state  # big ints (PCG64) or uint arrays (MT19937, SFC64)
    expected = generator.random(5)
    restored = np.random.Generator(make())
    restored.bit_generator.state = round_trip(state)
    assert np.array_equal(restored.random(5), expected)


def test_torch_generator_state_resumes_the_same_stream():
    g = torch.Generator().manual_seed(9)
    torch.rand(11, generator=g)
    state = g.get_state()
    expected = torch.rand(4, generator=g)
    restored = torch.Generator()
    restored.set_state(round_trip(state))
    assert torch.equal(torch.rand(4, generator=restored), expected)


def test_special_floats_keep_their_bits():
    values = [float("nan"), -float("nan"), float("inf"), -float("inf"), -0.0, 5e-324,
              struct.unpack("<d", struct.pack("<Q", 0x7FF0000000000001))[0]]  # signalling NaN
    assert_identical(values, round_trip(values))


def test_huge_ints_beyond_the_decimal_digit_cap():
    value = 7 ** 20000  # ~16900 decimal digits, above Python's default str() cap of 4300
    back = round_trip({value: -value})
    assert next(iter(back)) == value and back[value] == -value


def test_colliding_names_get_distinct_tensors():
    state = {"1": torch.zeros(1), 1: torch.ones(1), "__metadata__": torch.full((1,), 2.0)}
    tensors, _ = pack_state(state)
    assert len(tensors) == 3 and "__metadata__" not in tensors
    assert_identical(state, round_trip(state))


def test_lazy_conjugates_are_stored_resolved():
    value = torch.tensor([1 + 2j, 3 - 1j], dtype=torch.complex128).conj()
    back = round_trip({"z": value, "c64": value.to(torch.complex64)})
    assert torch.equal(back["z"], torch.tensor([1 - 2j, 3 + 1j], dtype=torch.complex128))
    assert not back["z"].is_conj() and back["c64"].dtype == torch.complex64


def test_packed_tensors_are_snapshots():
    live = torch.zeros(3)
    tensors, skeleton = pack_state({"w": live})
    live += 1
    assert torch.equal(unpack_state(tensors, skeleton)["w"], torch.zeros(3))


@pytest.mark.parametrize("bad, fragment", [
    ({"x": {1, 2}}, "set"),
    ({"x": b"raw"}, "bytes"),
    ({(1, 2): 3}, "dict key"),
    ({True: 1}, "dict key"),
    ({"p": torch.nn.Parameter(torch.ones(1))}, "Parameter"),
    ({"s": np.array(["text"])}, "dtype <U4"),
    ({"o": np.array([object()], dtype=object)}, "dtype object"),
    ({"d": np.datetime64("2024-01-01")}, "datetime64"),
    ([1 + 2j], "complex"),
])
def test_unpackable_values_are_refused_with_their_path(bad, fragment):
    with pytest.raises(ValueError, match=fragment):
        pack_state(bad)


def test_a_structure_containing_itself_is_refused():
    loop = []
    loop.append(loop)
    with pytest.raises(ValueError, match="contains itself"):
        pack_state({"a": loop})


def test_unpack_refuses_missing_extra_reused_and_mismatched_tensors():
    tensors, skeleton = pack_state({"a": torch.zeros(2), "b": np.ones(3, np.float32)})
    with pytest.raises(BadInput, match="does not hold"):
        unpack_state({"b": tensors["b"]}, skeleton)
    with pytest.raises(BadInput, match="not part of the layout"):
        unpack_state({**tensors, "stray": torch.zeros(1)}, skeleton)
    with pytest.raises(BadInput, match="second time"):
        unpack_state({"a": tensors["a"]}, {"list": [skeleton["dict"][0][1]] * 2})
    with pytest.raises(BadInput, match="shape"):
        unpack_state({**tensors, "a": torch.zeros(3)}, skeleton)
    with pytest.raises(BadInput, match="float32"):
        unpack_state({**tensors, "b": torch.ones(3, dtype=torch.float64)}, skeleton)


def _positions(node, out):
    """Every (container, key) slot of a JSON tree."""
    if isinstance(node, dict):
        items = node.items()
    elif isinstance(node, list):
        items = enumerate(node)
    else:
        return out
    for key, child in items:
        out.append((node, key))
        _positions(child, out)
    return out


_junk = st.one_of(st.none(), st.booleans(), st.integers(-3, 2**70), st.floats(allow_nan=False),
                  st.text(max_size=4), st.just([]), st.just({}), st.just({"int": "0x"}),
                  st.just({"tensor": "a", "dtype": "int8", "shape": [2]}),
                  st.just({"array": "b", "dtype": "|O", "shape": [3]}),
                  st.just({"numpy_scalar": "<f4", "bytes": "00"}))


@settings(max_examples=300, deadline=None)
@given(st.data())
def test_mutated_real_layouts_raise_bad_input_or_round_trip(data):
    """One slot of a real layout replaced with junk: BadInput, or a valid (different) state."""
    state = {"a": torch.arange(2.0), "b": np.ones(3, np.float32), 0: [1.5, (None, 2**80)],
             "n": np.int16(4), "nan": float("nan")}
    tensors, skeleton = pack_state(state)
    skeleton = json.loads(json.dumps(skeleton))
    container, key = data.draw(st.sampled_from(_positions(skeleton, [])))
    container[key] = data.draw(_junk)
    try:
        unpack_state(tensors, skeleton)
    except BadInput:
        pass
