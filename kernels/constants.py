"""Module-level constant tensors (tables, generators, bounds) on the device of the inputs.

Kernels keep their precomputed tables on the CPU, where they are built once;
:func:`on` returns a table on another device, copied the first time it is asked
for there and remembered, so a GPU run pays one copy per table, not one per call.
"""

from __future__ import annotations

import torch

_COPIES: dict[tuple[int, torch.device], torch.Tensor] = {}


def on(table: torch.Tensor, device) -> torch.Tensor:
    """``table`` (a module-level constant that lives as long as the program) on ``device``."""
    device = torch.device(device)
    if table.device == device:
        return table
    key = (id(table), device)
    copy = _COPIES.get(key)
    if copy is None:
        copy = _COPIES[key] = table.to(device)
    return copy
