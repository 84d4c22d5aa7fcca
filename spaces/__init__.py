"""State spaces: what every space has (:class:`Space`), manifolds and finite state spaces.

``SPACE_KINDS`` maps each space's ``kind`` to its class; ``from_config``
rebuilds a space from the JSON dictionary its ``config()`` returns, and
``register`` adds a space of your own.
"""

from __future__ import annotations

from heatwalk.errors import InputError
from heatwalk.spaces.base import Option, Space
from heatwalk.spaces.manifold import IsotropicKernel, Manifold
from heatwalk.spaces.finite import FiniteStateSpace
from heatwalk.spaces.torus import Torus
from heatwalk.spaces.sphere import Sphere
from heatwalk.spaces.so3 import SO3
from heatwalk.spaces.simplex import Simplex
from heatwalk.spaces.categories import Categories
from heatwalk.spaces.euclidean import Euclidean
from heatwalk.spaces.product import Product, table_factor_options

SPACE_KINDS: dict[str, type[Space]] = {
    cls.kind: cls for cls in (Torus, Sphere, SO3, Simplex, Categories, Euclidean, Product)
}
# a product read from a table takes every table space's reading options (each goes to the factors declaring it)
Product.file_options = table_factor_options(SPACE_KINDS.values())

__all__ = ["Space", "Manifold", "FiniteStateSpace", "IsotropicKernel", "Option", "Torus", "Sphere", "SO3",
           "Simplex", "Categories", "Euclidean", "Product", "SPACE_KINDS", "from_config", "register"]


def register(cls: type[Space]) -> type[Space]:
    """Make ``cls`` rebuildable from a config whose ``kind`` is ``cls.kind`` (usable as a class decorator)."""
    if not (isinstance(cls, type) and issubclass(cls, Space)):
        raise InputError(f"register: expected a Space subclass, got {cls!r}", field="cls")
    SPACE_KINDS[cls.kind] = cls
    Product.file_options = table_factor_options(SPACE_KINDS.values())
    return cls


def from_config(config: dict) -> Space:
    """Rebuild a space from ``space.config()``; the inverse of :meth:`Space.config`."""
    if not isinstance(config, dict) or "kind" not in config:
        raise InputError(f"space config must be a dict with a 'kind' key, got {config!r}")
    kind = config["kind"]
    if kind not in SPACE_KINDS:
        raise InputError(f"unknown space kind {kind!r}; known: {sorted(SPACE_KINDS)}", field="kind")
    return SPACE_KINDS[kind].from_config({k: v for k, v in config.items() if k != "kind"})
