"""heatwalk: diffusion generative models on manifolds and finite state spaces.

Every forward process is a heat flow whose conditional law x_t | x_0 can be
sampled exactly and whose log-density and score are evaluated to float64
accuracy; one training loop and one set of samplers serve every space.
"""

from heatwalk.errors import InputError
from heatwalk import spaces

__all__ = ["InputError", "spaces"]
__version__ = "0.1.0"
