"""Class labels: from user values (ints or strings) to class names and indices, and back.

Class names are sorted (integers numerically, strings alphabetically) and saved
with the model (``model.json``), so index k always means the same class. A
label sequence mixing integers and strings, or holding anything else (floats,
None, NaN), is refused with the position of the first bad entry.
"""

from __future__ import annotations

import numbers

import torch

from heatwalk.errors import InputError


def _normalise(value, i: int, what: str):
    if isinstance(value, bool):
        raise InputError(f"{what}: entry {i} is the boolean {value!r}; labels are integers or strings", row=i,
                         field="labels")
    if isinstance(value, numbers.Integral):
        return int(value)
    if isinstance(value, str):
        if value == "":
            raise InputError(f"{what}: entry {i} is an empty string", row=i, field="labels")
        return value
    if isinstance(value, numbers.Real) and float(value).is_integer():
        return int(value)
    raise InputError(f"{what}: entry {i} is {value!r}; labels are integers or strings", row=i, field="labels")


def _as_list(labels) -> list:
    if isinstance(labels, torch.Tensor):
        return labels.tolist()
    if hasattr(labels, "tolist") and not isinstance(labels, (str, bytes)):  # numpy arrays, pandas Series
        return labels.tolist()
    if isinstance(labels, (str, bytes)) or not hasattr(labels, "__iter__"):
        raise InputError(f"labels: expected a sequence of class names, got {type(labels).__name__}", field="labels")
    return list(labels)


def encode_labels(labels, n: int) -> tuple[list, torch.Tensor]:
    """(sorted class names, int64 indices (n,)) of a sequence of n labels."""
    values = [_normalise(v, i, "labels") for i, v in enumerate(_as_list(labels))]
    if len(values) != n:
        raise InputError(f"labels: got {len(values)} labels for {n} data points", field="labels")
    kinds = {type(v) for v in values}
    if len(kinds) > 1:
        i = next(i for i, v in enumerate(values) if type(v) is not type(values[0]))
        raise InputError(f"labels: entry {i} is {values[i]!r} but entry 0 is {values[0]!r}; use integers or "
                         f"strings, not both", row=i, field="labels")
    classes = sorted(set(values))
    index = {c: k for k, c in enumerate(classes)}
    # cpu: labels are parsed on the CPU; fit and Model move them
    return classes, torch.tensor([index[v] for v in values], dtype=torch.int64)


def indices_for(classes: list | None, label, n: int) -> torch.Tensor | None:
    """Indices (n,) of one class name (broadcast) or one per sample, among a model's ``classes``."""
    if label is None:
        return None
    if classes is None:
        raise InputError("label= was given but this model was fitted without labels", field="label")
    items = [label] if isinstance(label, (str, numbers.Integral)) else _as_list(label)
    if len(items) not in (1, n):
        raise InputError(f"label: give one class or one per sample ({n}), got {len(items)}", field="label")
    index = {c: k for k, c in enumerate(classes)}
    out = []
    for i, v in enumerate(items):
        v = _normalise(v, i, "label")
        if v not in index:
            raise InputError(f"label: {v!r} was never seen in training; classes: {classes}", field="label")
        out.append(index[v])
    # cpu: labels are parsed on the CPU; fit and Model move them
    return torch.tensor(out, dtype=torch.int64).expand(n).clone()
