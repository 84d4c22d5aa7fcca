"""heatwalk: diffusion generative models on manifolds and finite state spaces.

Every forward process is a heat flow whose conditional law x_t | x_0 can be
sampled exactly and whose log-density and score are evaluated to float64
accuracy; one training loop and one set of samplers serve every space.

    >>> import heatwalk
    >>> space = heatwalk.spaces.Torus(2)
    >>> model = heatwalk.fit(space, angles)          # doctest: +SKIP
    >>> samples = model.sample(1000)                 # doctest: +SKIP
"""

from heatwalk.errors import InputError
from heatwalk import spaces
from heatwalk.core.training import fit
from heatwalk.core.model import Model, load

__all__ = ["InputError", "spaces", "fit", "Model", "load"]
__version__ = "0.1.0"
