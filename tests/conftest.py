"""Test set-up: ladder first (it asks for one CPU device per core before JAX starts), then float64."""

import ladder  # noqa: F401  (must precede the first JAX import)
import jax

jax.config.update("jax_enable_x64", True)
