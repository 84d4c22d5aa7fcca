"""The files of a model folder: ``model.json`` checked against its schema, and the network weights.

Weights are written as ``weights.safetensors``: the safetensors format, an
8-byte header length, a JSON header (name, dtype, shape and byte range of each
tensor) and the raw tensor bytes — no pickle, nothing executable. Folders
written before it hold ``weights.pt`` (a torch archive), still read with
``torch.load(weights_only=True)``, which accepts only tensors and plain
containers.

Loading is checked in this order, each failure an :class:`InputError` naming the
file and, where there is one, the key:

1. ``model.json``: at most :data:`CONFIG_MAX_BYTES`, nested at most
   :data:`CONFIG_MAX_DEPTH` deep, valid JSON, the keys and types of
   :data:`MODEL_SCHEMA`, network sizes within :data:`NETWORK_LIMITS`;
2. the network is built on the ``meta`` device (shapes only, no memory), its
   parameter count checked against :data:`MAX_PARAMETERS`;
3. the weights file's tensor names, shapes and dtypes (read from its header,
   before any tensor is read) must equal the network's;
4. the tensors are read and must be finite.
"""

from __future__ import annotations

import json
import os
import warnings
from pathlib import Path

import torch
from torch import nn

from heatwalk.core.networks import NETWORKS, build_network
from heatwalk.errors import InputError
from heatwalk.io.atomic import file_mode

WEIGHTS_NAME = "weights.safetensors"
LEGACY_WEIGHTS_NAME = "weights.pt"
#: largest model.json read (a rate matrix of a few hundred states is well below it)
CONFIG_MAX_BYTES = 16 * 2**20
#: deepest nesting of lists and objects accepted in model.json (a saved model nests at most ~6 deep)
CONFIG_MAX_DEPTH = 32
#: largest network accepted, in parameters (4 GB of float32)
MAX_PARAMETERS = 10**9
#: largest value of each size in a network config; layer counts are kept small, since each layer is an object
_WIDTH = 2**24
#: longest list in a network config (one entry per factor of a product)
MAX_LIST_LENGTH = 64
NETWORK_LIMITS = {
    "mlp": {"in_dim": _WIDTH, "time_dim": _WIDTH, "out_dim": _WIDTH, "hidden": _WIDTH, "depth": 1000,
            "fourier_features": _WIDTH, "fourier_scale": None},
    "residual": {"in_dim": _WIDTH, "time_dim": _WIDTH, "out_dim": _WIDTH, "hidden": _WIDTH, "depth": 1000,
                 "fourier_features": _WIDTH, "fourier_scale": None, "time_skip": bool},
    "factored": {"in_dims": [_WIDTH], "time_dim": _WIDTH, "out_dims": [_WIDTH], "hidden": _WIDTH, "depth": 1000,
                 "time_skips": [bool]},
    "transformer": {"length": _WIDTH, "n_inputs": _WIDTH, "n_outputs": _WIDTH, "time_dim": _WIDTH,
                    "d_model": _WIDTH, "n_layers": 1000, "n_heads": 4096},
}
#: model.json: key -> (expected type, required)
MODEL_SCHEMA = {
    "format_version": (int, True),
    "space": (dict, True),
    "objective": (dict, True),
    "network": (dict, True),
    "record": (dict, False),
}
_SUB_SCHEMA = {
    "space": {"kind": (str, True)},
    "objective": {"name": (str, True), "schedule": (dict, True)},
    "network": {"name": (str, True), "config": (dict, True)},
}
_TYPE_NAMES = {int: "an integer", str: "a string", dict: "an object {...}", list: "a list [...]"}


def _json_type(value) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string", list: "a list",
            dict: "an object", type(None): "null"}.get(type(value), type(value).__name__)


def _check_depth(text: str, where: Path) -> None:
    """Refuse nesting deeper than CONFIG_MAX_DEPTH, by scanning brackets outside strings (no recursion)."""
    depth, in_string, escaped = 0, False, False
    for ch in text:
        if in_string:
            if escaped:
                escaped = False
            elif ch == "\\":
                escaped = True
            elif ch == '"':
                in_string = False
        elif ch == '"':
            in_string = True
        elif ch in "[{":
            depth += 1
            if depth > CONFIG_MAX_DEPTH:
                raise InputError(f"{where}: nested more than {CONFIG_MAX_DEPTH} levels deep; not a heatwalk model "
                                 f"config")
        elif ch in "]}":
            depth -= 1


def _check_keys(obj: dict, schema: dict, where: Path, prefix: str, closed: bool) -> None:
    for key, (kind, required) in schema.items():
        name = f"{prefix}{key}"
        if key not in obj:
            if required:
                raise InputError(f"{where}: key {name!r} is missing (expected {_TYPE_NAMES[kind]})", field=name)
            continue
        value = obj[key]
        if not isinstance(value, kind) or isinstance(value, bool):
            raise InputError(f"{where}: key {name!r} must be {_TYPE_NAMES[kind]}, got {_json_type(value)} "
                             f"{json.dumps(value)[:60]}", field=name)
    if closed:
        unknown = sorted(set(obj) - set(schema))
        if unknown:
            raise InputError(f"{where}: unknown key {prefix}{unknown[0]!r} (known: {', '.join(sorted(schema))})",
                             field=f"{prefix}{unknown[0]}")


def _check_network(network: dict, where: Path) -> None:
    name, config = network["name"], network["config"]
    if name not in NETWORKS:
        raise InputError(f"{where}: key 'network.name' is {name!r}; known networks: {sorted(NETWORKS)}",
                         field="network.name")
    limits = NETWORK_LIMITS.get(name, {})
    for key, value in config.items():
        field = f"network.config.{key}"
        if limits and key not in limits:
            raise InputError(f"{where}: unknown key {field!r} for a {name} network (known: {', '.join(limits)})",
                             field=field)
        top = limits.get(key, _WIDTH)
        if isinstance(top, list):  # a list of one kind of value, one per factor
            if not isinstance(value, list) or not 1 <= len(value) <= MAX_LIST_LENGTH:
                raise InputError(f"{where}: key {field!r} must be a list of 1 to {MAX_LIST_LENGTH} values, got "
                                 f"{json.dumps(value)[:60]}", field=field)
            for i, item in enumerate(value):
                _check_value(item, top[0], f"{field}[{i}]", where)
            continue
        _check_value(value, top, field, where)


def _check_value(value, top, field: str, where: Path) -> None:
    """One network size: a boolean (``top`` is bool), a positive finite number (None), an integer in [1, top]."""
    if top is bool:
        if not isinstance(value, bool):
            raise InputError(f"{where}: key {field!r} must be true or false, got {json.dumps(value)[:60]}",
                             field=field)
        return
    if top is None:  # a positive finite real number
        if not isinstance(value, (int, float)) or isinstance(value, bool) or not 0 < value < float("inf"):
            raise InputError(f"{where}: key {field!r} must be a positive finite number, got "
                             f"{json.dumps(value)[:60]}", field=field)
        return
    if not isinstance(value, int) or isinstance(value, bool) or not 1 <= value <= top:
        raise InputError(f"{where}: key {field!r} must be an integer in [1, {top}], got {json.dumps(value)[:60]}",
                         field=field)


def read_model_config(path) -> dict:
    """Read and check ``model.json`` (module docstring, step 1); returns the parsed dict."""
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > CONFIG_MAX_BYTES:
            raise InputError(f"{path}: {size} bytes, more than a model config can hold ({CONFIG_MAX_BYTES})")
        text = path.read_text(encoding="utf-8")
    except OSError as e:
        raise InputError(f"{path}: cannot be read ({e.strerror or e})") from None
    except UnicodeDecodeError as e:
        raise InputError(f"{path}: not UTF-8 text (byte {e.start})") from None
    _check_depth(text, path)
    try:
        cfg = json.loads(text)
    except (json.JSONDecodeError, RecursionError) as e:
        raise InputError(f"{path}: not valid JSON ({e})") from None
    if not isinstance(cfg, dict):
        raise InputError(f"{path}: the top level must be a JSON object {{...}}, got {_json_type(cfg)}")
    _check_keys(cfg, MODEL_SCHEMA, path, "", closed=True)
    for key, schema in _SUB_SCHEMA.items():
        _check_keys(cfg[key], schema, path, f"{key}.", closed=False)
    _check_network(cfg["network"], path)
    return cfg


def meta_network(name: str, config: dict, where="network") -> nn.Module:
    """The network ``name`` built on the meta device (shapes only); refuses more than MAX_PARAMETERS."""
    try:
        with torch.device("meta"):
            net = build_network(name, dict(config))
    except InputError as e:
        raise InputError(f"{where}: {e.message}", field=e.field) from None
    except (TypeError, RuntimeError, ValueError) as e:
        raise InputError(f"{where}: cannot build the {name} network from its config ({e})", field="network") from None
    check_parameter_count(net, where)
    return net


def check_parameter_count(net: nn.Module, where="network") -> int:
    """Number of parameters of ``net`` (meta or real); InputError above :data:`MAX_PARAMETERS`."""
    count = sum(p.numel() for p in net.parameters())
    if count > MAX_PARAMETERS:
        raise InputError(f"{where}: the network would have {count:.3g} parameters, more than the {MAX_PARAMETERS:.0e} "
                         f"heatwalk accepts (check its width and depth)", field="network")
    return count


def _shape_table(state: dict) -> dict:
    return {k: (tuple(v.shape), v.dtype) for k, v in state.items()}


def _compare(expected: dict, found: dict, where: Path) -> None:
    """Names, shapes and dtypes of the weights file against the network's."""
    missing, extra = sorted(set(expected) - set(found)), sorted(set(found) - set(expected))
    if missing or extra:
        parts = ([f"missing {', '.join(missing[:3])}"] if missing else []) + \
                ([f"unexpected {', '.join(extra[:3])}"] if extra else [])
        raise InputError(f"{where}: the tensors do not match the network of model.json ({'; '.join(parts)})")
    for key, (shape, dtype) in expected.items():
        got_shape, got_dtype = found[key]
        if got_shape != shape or got_dtype != dtype:
            raise InputError(f"{where}: tensor {key!r} has shape {list(got_shape)} ({got_dtype}); the network of "
                             f"model.json needs {list(shape)} ({dtype})", field=key)


_SAFETENSORS_DTYPES = {"F32": torch.float32, "F64": torch.float64, "F16": torch.float16, "BF16": torch.bfloat16,
                       "I64": torch.int64, "I32": torch.int32, "I16": torch.int16, "I8": torch.int8,
                       "U8": torch.uint8, "BOOL": torch.bool}


def _read_safetensors(path: Path, expected: dict) -> dict:
    from safetensors import SafetensorError, safe_open

    try:
        with safe_open(str(path), framework="pt", device="cpu") as f:
            found = {}
            for k in f.keys():
                piece = f.get_slice(k)
                found[k] = (tuple(piece.get_shape()), _SAFETENSORS_DTYPES.get(piece.get_dtype(), piece.get_dtype()))
            _compare(expected, found, path)
            return {k: f.get_tensor(k) for k in expected}
    except (SafetensorError, OSError, ValueError, RuntimeError) as e:
        if isinstance(e, InputError):
            raise
        raise InputError(f"{path}: not a readable safetensors weights file ({type(e).__name__}: "
                         f"{str(e).splitlines()[0] if str(e) else 'damaged'})") from None


def load_plain_tensors(path: Path, what: str):
    """``torch.load(path, weights_only=True)``, memory-mapped where the file allows it, errors worded by heatwalk.

    Nothing but tensors, numbers, strings and plain containers is accepted; a file holding anything
    else (a pickled object, code) is refused without running it.
    """
    last = None
    for mmap in (True, False):  # mmap needs the zip archive format of torch >= 1.6; older archives load in full
        try:
            with warnings.catch_warnings():  # torch's own remarks on odd files would add lines to the one message
                warnings.simplefilter("ignore")
                return torch.load(path, map_location="cpu", weights_only=True, mmap=mmap)
        except Exception as e:  # noqa: BLE001 - every failure becomes the one message below
            last = e
    raise InputError(f"{path}: not a {what} made of plain tensors ({type(last).__name__}); it is damaged or holds "
                     f"something other than tensors and numbers (such as pickled code, which heatwalk never runs): "
                     f"use a file written by heatwalk")


def _read_legacy(path: Path, expected: dict) -> dict:
    state = load_plain_tensors(path, "weights file")
    if not isinstance(state, dict) or not all(isinstance(k, str) and isinstance(v, torch.Tensor)
                                              for k, v in state.items()):
        raise InputError(f"{path}: expected a table of named tensors, got {type(state).__name__}")
    _compare(expected, _shape_table(state), path)
    return state


def read_weights(folder, net_meta: nn.Module) -> dict:
    """The state dict of a model folder (``weights.safetensors``, else ``weights.pt``), checked against the
    meta network's names, shapes and dtypes before any tensor is read, and for finite values after."""
    folder = Path(folder)
    expected = _shape_table(net_meta.state_dict())
    new, old = folder / WEIGHTS_NAME, folder / LEGACY_WEIGHTS_NAME
    if new.is_file():
        state, where = _read_safetensors(new, expected), new
    else:
        state, where = _read_legacy(old, expected), old
    for key, tensor in state.items():
        if tensor.is_floating_point() and not bool(torch.isfinite(tensor).all()):
            bad = int((~torch.isfinite(tensor)).sum())
            raise InputError(f"{where}: tensor {key!r} has {bad} NaN or infinite entries: the weights are corrupted "
                             f"(or the training diverged)", field=key)
    return state


def write_weights(folder, net: nn.Module) -> Path:
    """Write ``net``'s state dict to ``folder / weights.safetensors`` (contiguous copies, no shared storage)."""
    from safetensors.torch import save_file

    path = Path(folder) / WEIGHTS_NAME
    save_file({k: v.detach().contiguous().clone() for k, v in net.state_dict().items()}, str(path))
    os.chmod(path, file_mode())  # the writer makes the file private (0600); follow the umask as open() would
    return path


def weights_path(folder) -> Path | None:
    """The weights file of a model folder, or None."""
    for name in (WEIGHTS_NAME, LEGACY_WEIGHTS_NAME):
        if (Path(folder) / name).is_file():
            return Path(folder) / name
    return None
