"""State spaces: geometry, validation and the forward heat flow of each.

``from_config`` rebuilds a space from the JSON dictionary its ``config()``
returns; each space registers its ``kind`` in ``SPACE_KINDS``.
"""

from __future__ import annotations

from heatwalk.errors import InputError
from heatwalk.spaces.base import Space
from heatwalk.spaces.torus import Torus
from heatwalk.spaces.sphere import Sphere
from heatwalk.spaces.so3 import SO3
from heatwalk.spaces.simplex import Simplex
from heatwalk.spaces.categories import Categories
from heatwalk.spaces.euclidean import Euclidean

SPACE_KINDS: dict[str, type] = {"torus": Torus}
SPACE_KINDS["sphere"] = Sphere
SPACE_KINDS["so3"] = SO3
SPACE_KINDS["simplex"] = Simplex
SPACE_KINDS["categories"] = Categories
SPACE_KINDS["euclidean"] = Euclidean

__all__ = ["Space", "Torus", "Sphere", "SPACE_KINDS", "from_config", "register"]


def register(kind: str, cls: type) -> None:
    """Make ``cls`` rebuildable from a config whose ``kind`` is ``kind``."""
    SPACE_KINDS[kind] = cls


def from_config(config: dict) -> Space:
    """Rebuild a space from ``space.config()``; the inverse of :meth:`Space.config`."""
    if not isinstance(config, dict) or "kind" not in config:
        raise InputError(f"space config must be a dict with a 'kind' key, got {config!r}")
    kind = config["kind"]
    if kind not in SPACE_KINDS:
        raise InputError(f"unknown space kind {kind!r}; known: {sorted(SPACE_KINDS)}", field="kind")
    cls = SPACE_KINDS[kind]
    args = {k: v for k, v in config.items() if k != "kind"}
    if hasattr(cls, "from_config"):
        return cls.from_config(args)
    return cls(**args)
