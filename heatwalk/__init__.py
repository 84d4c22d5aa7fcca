"""heatwalk: diffusion generative models on manifolds and finite state spaces.

Every forward process is a heat flow whose conditional law x_t | x_0 can be
sampled exactly and whose log-density and score are evaluated to float64
accuracy; one training loop and one set of samplers serve every space.

    >>> import heatwalk
    >>> space = heatwalk.spaces.Torus(2)
    >>> model = heatwalk.fit(space, angles)          # doctest: +SKIP
    >>> samples = model.sample(1000)                 # doctest: +SKIP

The public names are imported on first use (PEP 562), so ``import heatwalk``
and ``heatwalk --help`` / ``--version`` do not load torch.
"""

from heatwalk.errors import InputError

__version__ = "0.2.0"
__all__ = ["InputError", "spaces", "fit", "Model", "load", "is_main_process", "__version__"]

_LAZY = {
    "spaces": ("heatwalk.spaces", None),
    "fit": ("heatwalk.core.training", "fit"),
    "Model": ("heatwalk.core.model", "Model"),
    "load": ("heatwalk.core.model", "load"),
    "is_main_process": ("heatwalk.core.parallel", "is_main_process"),
}


def __getattr__(name):
    if name not in _LAZY:
        raise AttributeError(f"module 'heatwalk' has no attribute {name!r}")
    import importlib

    module_name, attr = _LAZY[name]
    module = importlib.import_module(module_name)
    value = module if attr is None else getattr(module, attr)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
