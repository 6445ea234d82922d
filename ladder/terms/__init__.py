"""Model terms: small pure functions on unit-free values, one concept per module.

Each term is written for a single star (scalars in, scalar out); :mod:`ladder.model` composes
them and applies ``jax.vmap`` in one place. Each docstring gives the equation, the symbols and
the output names they appear under, and the source.
"""

from .metallicity import metallicity_offset
from .pl import pl_absolute_magnitude
from .wesenheit import wesenheit_error, wesenheit_index

__all__ = ["pl_absolute_magnitude", "metallicity_offset", "wesenheit_index", "wesenheit_error"]
