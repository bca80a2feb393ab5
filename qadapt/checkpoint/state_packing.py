"""Nested training state split into named tensors plus a JSON layout, and put back together.

Holds:
    LAYOUT_VERSION -- the version of the layout (skeleton) form this module writes and reads.
    STORED_DTYPES -- tensor dtypes a safetensors file holds as they are.
    pack_state -- ``obj -> (tensors, skeleton)``: every array becomes a named tensor, the rest JSON.
    unpack_state -- ``(tensors, skeleton) -> obj``: the exact object back, validated as it goes.
    skeleton_to_text / skeleton_from_text -- the skeleton as versioned strict JSON text.

What can be packed: dict (and OrderedDict) with str or int keys, list, tuple, torch.Tensor,
numpy.ndarray, numpy scalars of a numeric dtype, int (any size), float (any bit pattern,
NaN payloads and -0.0 included), str, bool and None. The round trip is exact: the same Python
types, the same key types and order, tensors and arrays with the same dtype, shape and bytes.
Not kept: identity (two references to one list come back as two equal lists), a tensor's
``requires_grad`` and an OrderedDict's ``_metadata`` attribute (module version hints).

Skeleton nodes (JSON):
    null, true, false, "text", 12 (|int| <= 2**53), 1.5 (finite float; JSON keeps the repr)
    {"int": "-0x1f..."}                    -- an int too large for every JSON reader (hex: Python
                                              caps decimal conversion at 4300 digits)
    {"float_bits": "7ff8000000000000"}     -- NaN or an infinity, as its IEEE-754 bits
    {"list": [node, ...]}, {"tuple": [node, ...]}
    {"dict": [[key, node], ...]}, {"ordered_dict": [[key, node], ...]}  (key: str or int node)
    {"tensor": name, "dtype": "float32", "shape": [2, 3]}
    {"array": name, "dtype": "<f4", "shape": [2, 3]}   (numpy dtype string)
    {"numpy_scalar": "<f4", "bytes": "0000c03f"}       (little-endian bytes, hex)
"""

from __future__ import annotations

import json
import math
import re
import struct
from collections import OrderedDict
from collections.abc import Mapping
from typing import Any

import numpy as np
import torch

from qadapt.errors import BadInput

LAYOUT_VERSION = 1

_JSON_SAFE_INT = 2**53  # beyond this, JavaScript-style JSON readers round integers
_ROOT_NAME = "(root)"
_RESERVED_NAMES = frozenset({"__metadata__"})  # the safetensors header's own key
_NUMPY_KINDS = "biufc"  # bool, signed, unsigned, float, complex
_HEX_INT = re.compile(r"-?0x[0-9a-f]+")

# Tensor dtypes safetensors stores natively; complex128 travels as float64 pairs.
STORED_DTYPES: dict[str, torch.dtype] = {
    name: getattr(torch, name)
    for name in (
        "float64", "float32", "float16", "bfloat16", "int64", "int32", "int16", "int8",
        "uint64", "uint32", "uint16", "uint8", "bool", "complex64",
        "float8_e4m3fn", "float8_e5m2",
    )
    if hasattr(torch, name)
}
_PAIRED_DTYPES = {"complex128": torch.complex128}
_TENSOR_DTYPES = {**STORED_DTYPES, **_PAIRED_DTYPES}


def _dtype_name(dtype: torch.dtype) -> str:
    return str(dtype).removeprefix("torch.")


# -- packing ---------------------------------------------------------------------------------
class _Packer:
    def __init__(self) -> None:
        self.tensors: dict[str, torch.Tensor] = {}
        self._open: set[int] = set()  # containers on the current path (cycle check)

    def _name(self, path: tuple[str, ...]) -> str:
        base = "/".join(path) if path else _ROOT_NAME
        name, copy = base, 1
        while name in self.tensors or name in _RESERVED_NAMES:
            copy += 1
            name = f"{base}~{copy}"
        return name

    def _store(self, tensor: torch.Tensor, path: tuple[str, ...]) -> str:
        name = self._name(path)
        # A private contiguous copy: the packed state is a snapshot, and safetensors refuses
        # tensors that share memory.
        self.tensors[name] = tensor.detach().clone(memory_format=torch.contiguous_format)
        return name

    def node(self, value: Any, path: tuple[str, ...]) -> Any:
        kind = type(value)
        if value is None or kind is bool or kind is str:
            return value
        if kind is int:
            return _int_node(value)
        if kind is float:
            if math.isfinite(value):
                return value
            return {"float_bits": struct.pack(">d", value).hex()}
        if kind is torch.Tensor:
            return self._tensor(value, path)
        if kind is np.ndarray:
            return self._array(value, path)
        if isinstance(value, np.generic):
            return self._numpy_scalar(value, path)
        if kind in (list, tuple, dict, OrderedDict):
            if id(value) in self._open:
                raise ValueError(f"state at {_where(path)}: the structure contains itself")
            self._open.add(id(value))
            try:
                if kind is list or kind is tuple:
                    items = [self.node(v, (*path, str(i))) for i, v in enumerate(value)]
                    return {kind.__name__: items}
                pairs = [
                    [_key_node(k, path), self.node(v, (*path, _segment(k)))]
                    for k, v in value.items()
                ]
                return {"dict" if kind is dict else "ordered_dict": pairs}
            finally:
                self._open.discard(id(value))
        raise ValueError(
            f"state at {_where(path)}: cannot pack a {kind.__module__}.{kind.__qualname__}; "
            "expected dict, list, tuple, torch.Tensor, numpy.ndarray, a numpy scalar, int, "
            "float, str, bool or None"
        )

    def _tensor(self, tensor: torch.Tensor, path: tuple[str, ...]) -> dict[str, Any]:
        where = _where(path)
        if tensor.layout != torch.strided or tensor.device.type != "cpu":
            raise ValueError(
                f"state at {where}: a {tensor.layout} tensor on {tensor.device}; expected a "
                "dense CPU tensor"
            )
        dtype = _dtype_name(tensor.dtype)
        if dtype not in _TENSOR_DTYPES:
            raise ValueError(
                f"state at {where}: tensors of dtype {dtype} cannot be stored; accepted: "
                f"{', '.join(sorted(_TENSOR_DTYPES))}"
            )
        tensor = tensor.detach().resolve_conj().resolve_neg()  # lazy conjugate/negate bits
        stored = torch.view_as_real(tensor) if dtype in _PAIRED_DTYPES else tensor
        return {"tensor": self._store(stored, path), "dtype": dtype, "shape": list(tensor.shape)}

    def _array(self, array: np.ndarray, path: tuple[str, ...]) -> dict[str, Any]:
        where = _where(path)
        if array.dtype.kind not in _NUMPY_KINDS or array.dtype.fields is not None:
            raise ValueError(
                f"state at {where}: numpy arrays of dtype {array.dtype} cannot be stored; "
                "expected a bool, integer, float or complex dtype"
            )
        # np.array, not np.ascontiguousarray: the latter turns 0-d arrays into 1-d ones.
        native = np.array(array, dtype=array.dtype.newbyteorder("="), order="C", copy=True)
        try:
            tensor = torch.from_numpy(native)
        except TypeError as err:
            raise ValueError(
                f"state at {where}: numpy arrays of dtype {array.dtype} cannot be stored ({err})"
            ) from None
        if _dtype_name(tensor.dtype) not in _TENSOR_DTYPES:
            raise ValueError(f"state at {where}: numpy dtype {array.dtype} cannot be stored")
        if tensor.dtype in _PAIRED_DTYPES.values():
            tensor = torch.view_as_real(tensor)
        return {
            "array": self._store(tensor, path),
            "dtype": array.dtype.str,
            "shape": list(array.shape),
        }

    def _numpy_scalar(self, value: np.generic, path: tuple[str, ...]) -> dict[str, Any]:
        if value.dtype.kind not in _NUMPY_KINDS:
            raise ValueError(
                f"state at {_where(path)}: numpy scalars of dtype {value.dtype} cannot be "
                "stored; expected a bool, integer, float or complex scalar"
            )
        little = value.dtype.newbyteorder("<")
        raw = np.asarray(value, dtype=little).tobytes()
        return {"numpy_scalar": little.str, "bytes": raw.hex()}


def _int_node(value: int) -> int | dict[str, str]:
    return value if abs(value) <= _JSON_SAFE_INT else {"int": hex(value)}


def _segment(key: Any) -> str:
    """A dict key as one part of a tensor name or an error path."""
    if type(key) is int and abs(key) > _JSON_SAFE_INT:
        return hex(key)
    return str(key) if type(key) in (str, int) else type(key).__name__


def _key_node(key: Any, path: tuple[str, ...]) -> Any:
    if type(key) is str:
        return key
    if type(key) is int:
        return _int_node(key)
    raise ValueError(
        f"state at {_where(path)}: dict key of type {type(key).__name__}; "
        "expected str or int keys"
    )


def _where(path: tuple[str, ...]) -> str:
    return "/".join(path) if path else "the top level"


def pack_state(obj: Any) -> tuple[dict[str, torch.Tensor], Any]:
    """Split ``obj`` into ``(tensors, skeleton)``.

    ``tensors`` maps path-like names (``"optimizer/state/0/exp_avg"``) to private contiguous
    copies of every tensor and array in ``obj``; ``skeleton`` is JSON-able (strict JSON: no
    NaN tokens) and refers to the tensors by name. Raises ValueError naming the path of
    anything that cannot be packed.

    Example:
        >>> tensors, skeleton = pack_state({"step": 3, "w": torch.ones(2)})
        >>> sorted(tensors), skeleton["dict"][0]
        (['w'], ['step', 3])
        >>> unpack_state(tensors, skeleton)
        {'step': 3, 'w': tensor([1., 1.])}
    """
    packer = _Packer()
    skeleton = packer.node(obj, ())
    return packer.tensors, skeleton


# -- unpacking -------------------------------------------------------------------------------
def _fail(where: str, problem: str) -> BadInput:
    return BadInput(f"training state layout at {where}: {problem}")


def _shape(value: Any, where: str) -> tuple[int, ...]:
    if not isinstance(value, list) or any(
        type(d) is not int or d < 0 for d in value
    ):
        raise _fail(where, f"shape {value!r} is not a list of non-negative integers")
    return tuple(value)


class _Unpacker:
    def __init__(self, tensors: Mapping[str, torch.Tensor]) -> None:
        self.tensors = tensors
        self.used: set[str] = set()

    def _take(self, name: Any, where: str) -> torch.Tensor:
        if not isinstance(name, str):
            raise _fail(where, f"tensor name {name!r} is not a string")
        if name not in self.tensors:
            raise _fail(where, f"names tensor {name!r}, which the file does not hold")
        if name in self.used:
            raise _fail(where, f"names tensor {name!r} a second time")
        self.used.add(name)
        tensor = self.tensors[name]
        if not isinstance(tensor, torch.Tensor):
            raise _fail(where, f"{name!r} is a {type(tensor).__name__}, not a tensor")
        return tensor

    def node(self, node: Any, where: str) -> Any:
        if node is None or type(node) in (bool, str, int, float):
            if type(node) is float and not math.isfinite(node):
                raise _fail(where, f"non-finite number {node!r} outside a float_bits node")
            return node
        if type(node) is list:
            raise _fail(where, "a bare JSON list; lists are written as {\"list\": [...]}")
        if type(node) is not dict or len(node) == 0:
            raise _fail(where, f"unexpected {type(node).__name__} node")
        tag = next(iter(node))
        handler = _HANDLERS.get(tag)
        if handler is None:
            raise _fail(where, f"unknown node kind {tag!r}; known: {', '.join(sorted(_HANDLERS))}")
        expected = _NODE_KEYS[tag]
        if set(node) != expected:
            raise _fail(where, f"a {tag!r} node has exactly the keys {sorted(expected)}")
        return handler(self, node, where)

    def _int(self, node: dict, where: str) -> int:
        text = node["int"]
        if type(text) is not str or not _HEX_INT.fullmatch(text):
            raise _fail(where, f"int {str(text)[:40]!r} is not a hexadecimal integer string")
        return int(text, 16)

    def _float_bits(self, node: dict, where: str) -> float:
        text = node["float_bits"]
        try:
            raw = bytes.fromhex(text) if type(text) is str else b""
        except ValueError:
            raw = b""
        if len(raw) != 8:
            raise _fail(where, f"float_bits {text!r} is not 16 hexadecimal digits")
        return struct.unpack(">d", raw)[0]

    def _sequence(self, node: dict, where: str) -> list | tuple:
        tag = next(iter(node))
        items = node[tag]
        if type(items) is not list:
            raise _fail(where, f"a {tag!r} node holds a list of nodes")
        values = [self.node(v, f"{where}/{i}") for i, v in enumerate(items)]
        return values if tag == "list" else tuple(values)

    def _mapping(self, node: dict, where: str) -> dict:
        tag = next(iter(node))
        pairs = node[tag]
        if type(pairs) is not list:
            raise _fail(where, f"a {tag!r} node holds a list of [key, value] pairs")
        result: dict = {} if tag == "dict" else OrderedDict()
        for pair in pairs:
            if type(pair) is not list or len(pair) != 2:
                raise _fail(where, f"{pair!r} is not a [key, value] pair")
            key = pair[0]
            if type(key) is dict and set(key) == {"int"}:
                key = self._int(key, where)
            elif type(key) not in (str, int):
                raise _fail(where, f"dict key {key!r} is not a string or an integer")
            if key in result:
                raise _fail(where, f"dict key {_segment(key)!r} appears twice")
            result[key] = self.node(pair[1], f"{where}/{_segment(key)}")
        return result

    def _tensor(self, node: dict, where: str) -> torch.Tensor:
        dtype, shape = node["dtype"], _shape(node["shape"], where)
        if type(dtype) is not str or dtype not in _TENSOR_DTYPES:
            raise _fail(where, f"tensor dtype {dtype!r} is not one of {sorted(_TENSOR_DTYPES)}")
        tensor = self._take(node["tensor"], where)
        if dtype in _PAIRED_DTYPES:
            if tensor.dtype != torch.float64 or tuple(tensor.shape) != (*shape, 2):
                raise _fail(where, f"stored tensor does not hold {dtype} values of shape {shape}")
            return torch.view_as_complex(tensor.contiguous()).clone()
        if tensor.dtype != _TENSOR_DTYPES[dtype] or tuple(tensor.shape) != shape:
            raise _fail(
                where,
                f"stored tensor is {_dtype_name(tensor.dtype)} of shape {tuple(tensor.shape)}, "
                f"the layout says {dtype} of shape {shape}",
            )
        return tensor

    def _array(self, node: dict, where: str) -> np.ndarray:
        dtype = _numpy_dtype(node["dtype"], where)
        shape = _shape(node["shape"], where)
        tensor = self._take(node["array"], where)
        native = dtype.newbyteorder("=")
        if dtype.kind == "c" and dtype.itemsize == 16 and tensor.dtype == torch.float64:
            if tensor.dim() == 0 or tensor.shape[-1] != 2:
                raise _fail(where, "stored tensor is not float64 pairs for a complex128 array")
            tensor = torch.view_as_complex(tensor.contiguous())
        try:
            values = tensor.numpy()
        except TypeError as err:
            raise _fail(where, f"stored tensor cannot be read as numpy ({err})") from None
        if values.dtype != native or values.shape != shape:
            raise _fail(
                where,
                f"stored tensor holds {values.dtype} of shape {values.shape}, the layout says "
                f"{dtype} of shape {shape}",
            )
        return values.astype(dtype, copy=True)

    def _numpy_scalar(self, node: dict, where: str) -> np.generic:
        dtype = _numpy_dtype(node["numpy_scalar"], where)
        text = node["bytes"]
        try:
            raw = bytes.fromhex(text) if type(text) is str else None
        except ValueError:
            raw = None
        if raw is None or len(raw) != dtype.itemsize:
            raise _fail(where, f"bytes {text!r} are not {dtype.itemsize} bytes in hexadecimal")
        return np.frombuffer(raw, dtype=dtype).astype(dtype.newbyteorder("="))[0]


def _numpy_dtype(text: Any, where: str) -> np.dtype:
    try:
        dtype = np.dtype(text) if type(text) is str else None
    except Exception:  # numpy raises TypeError, ValueError or SyntaxError for odd strings
        dtype = None
    simple = dtype is not None and dtype.fields is None and dtype.subdtype is None
    if not simple or dtype.kind not in _NUMPY_KINDS:
        raise _fail(where, f"numpy dtype {text!r} is not a bool, integer, float or complex dtype")
    return dtype


_HANDLERS = {
    "int": _Unpacker._int,
    "float_bits": _Unpacker._float_bits,
    "list": _Unpacker._sequence,
    "tuple": _Unpacker._sequence,
    "dict": _Unpacker._mapping,
    "ordered_dict": _Unpacker._mapping,
    "tensor": _Unpacker._tensor,
    "array": _Unpacker._array,
    "numpy_scalar": _Unpacker._numpy_scalar,
}
_NODE_KEYS = {
    "int": {"int"},
    "float_bits": {"float_bits"},
    "list": {"list"},
    "tuple": {"tuple"},
    "dict": {"dict"},
    "ordered_dict": {"ordered_dict"},
    "tensor": {"tensor", "dtype", "shape"},
    "array": {"array", "dtype", "shape"},
    "numpy_scalar": {"numpy_scalar", "bytes"},
}


def unpack_state(tensors: Mapping[str, torch.Tensor], skeleton: Any) -> Any:
    """Rebuild the object ``pack_state`` split into ``tensors`` and ``skeleton``.

    Every tensor the skeleton names must exist, match the recorded dtype and shape, and be
    named once; tensors the skeleton does not name are refused too. Raises BadInput (naming
    the node's path) for anything malformed, since the pair normally comes from a file.

    Example:
        >>> import numpy as np
        >>> state = {0: (np.arange(3), 2**70, float("nan"))}
        >>> back = unpack_state(*pack_state(state))
        >>> back[0][0].dtype, back[0][1], type(back[0][2])
        (dtype('int64'), 1180591620717411303424, <class 'float'>)
    """
    if not isinstance(tensors, Mapping):
        raise BadInput(f"tensors: got {type(tensors).__name__}, expected a mapping name -> tensor")
    unpacker = _Unpacker(tensors)
    try:
        obj = unpacker.node(skeleton, "the top level")
    except RecursionError:
        raise BadInput("training state layout: nested too deeply to read") from None
    unused = sorted(set(tensors) - unpacker.used)
    if unused:
        shown = ", ".join(repr(n) for n in unused[:3])
        raise BadInput(
            f"training state layout: {len(unused)} stored tensor(s) are not part of the "
            f"layout ({shown}{', ...' if len(unused) > 3 else ''})"
        )
    return obj


def skeleton_to_text(skeleton: Any) -> str:
    """The skeleton as compact strict JSON (used as safetensors header metadata)."""
    return json.dumps(
        {"layout_version": LAYOUT_VERSION, "layout": skeleton},
        separators=(",", ":"), ensure_ascii=False, allow_nan=False,
    )


def skeleton_from_text(text: str) -> Any:
    """Parse ``skeleton_to_text``'s output; BadInput if it is not a layout this code reads."""
    def refuse(token: str) -> None:
        raise BadInput(f"training state layout: the non-standard JSON token {token} is refused")

    try:
        document = json.loads(text, parse_constant=refuse)
    except json.JSONDecodeError as err:
        raise BadInput(f"training state layout: not valid JSON ({err})") from None
    if not isinstance(document, dict) or set(document) != {"layout_version", "layout"}:
        raise BadInput("training state layout: expected an object with layout_version and layout")
    version = document["layout_version"]
    if type(version) is not int or version != LAYOUT_VERSION:
        raise BadInput(
            f"training state layout: version {version!r} is not supported (this qadapt reads "
            f"version {LAYOUT_VERSION})"
        )
    return document["layout"]
