"""The TOML config file of ``heatwalk fit``: every command-line option has a key; flags override the file.

Keys are the option names with ``_`` (``train_steps = 5000``, ``space = "torus"``,
``degrees = true``, ``columns = ["phi", "psi"]``), at the top level of the file.
An unknown key is an error naming the key and the nearest valid one. The
resolved configuration (file, flags and defaults merged) is printed by
``--dry-run`` and saved in the model folder as ``fit_config.toml``, so a fit
can be repeated with ``heatwalk fit --config MODEL/fit_config.toml``.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from pathlib import Path

from heatwalk.errors import InputError

#: keys that are not saved in the resolved configuration (they describe this invocation, not the fit)
NOT_SAVED = ("config", "dry_run", "overwrite", "quiet")
#: keys whose value is a list in the file and a comma-separated string on the command line
LIST_KEYS = ("columns",)


def read_config(path) -> dict:
    """The key/value table of a TOML file (InputError naming the file and line when it is not valid TOML)."""
    path = Path(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise InputError(f"{path}: no such config file", field="config") from None
    except (OSError, UnicodeDecodeError) as e:
        raise InputError(f"{path}: cannot be read as UTF-8 text ({type(e).__name__})", field="config") from None
    try:
        table = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise InputError(f"{path}: not valid TOML ({e})", field="config") from None
    return table


def _check_value(path, key, value, kind):
    ok = (kind is bool and isinstance(value, bool)) or \
         (kind is int and isinstance(value, int) and not isinstance(value, bool)) or \
         (kind is float and isinstance(value, (int, float)) and not isinstance(value, bool)) or \
         (kind is str and isinstance(value, str)) or \
         (kind is list and isinstance(value, list) and all(isinstance(v, str) for v in value))
    if not ok:
        want = {bool: "true or false", int: "an integer", float: "a number", str: "a string",
                list: "a list of strings"}[kind]
        raise InputError(f"{path}: key {key!r} must be {want}, got {value!r}", field=key)
    if kind is float and not math.isfinite(value):
        raise InputError(f"{path}: key {key!r} must be a finite number, got {value!r}", field=key)
    return float(value) if kind is float else value


def merge_config(args, path, kinds: dict[str, type]) -> None:
    """Set every option of ``args`` that the command line left unset (None) from the config file; the keys so
    set are recorded in ``args.config_origin`` ({key: path}), so that range errors name the file and key."""
    table = read_config(path)
    origin = {}
    for key, value in table.items():
        if key not in kinds or key in ("config", "dry_run"):
            near = difflib.get_close_matches(key, [k for k in kinds if k not in ("config", "dry_run")], n=1)
            hint = f"; did you mean {near[0]!r}?" if near else ""
            raise InputError(f"{path}: unknown key {key!r}{hint}", field=key)
        value = _check_value(path, key, value, kinds[key])
        if isinstance(value, list):
            value = ",".join(value)
        if getattr(args, key, None) is None:
            setattr(args, key, value)
            origin[key] = str(path)
    args.config_origin = origin


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    text = str(value).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'


def resolved_toml(args, names) -> str:
    """TOML text of the resolved options ``names`` (unset options are left out)."""
    lines = ["# heatwalk fit: resolved configuration (file, command-line flags and defaults merged)"]
    for name in names:
        value = getattr(args, name, None)
        if value is None or name in NOT_SAVED or value is False and name not in ("resume", "inpainting"):
            continue
        if name in LIST_KEYS and isinstance(value, str):  # saved as the list the file's reader expects
            value = [v.strip() for v in value.split(",")]
        lines.append(f"{name} = {_toml_value(value)}")
    return "\n".join(lines) + "\n"
