"""Run-file prior specifications -> numpyro sample sites."""

from __future__ import annotations

__all__ = ["sample_parameter", "prior_distribution"]


def prior_distribution(spec, shape=()):
    """The numpyro distribution for a non-fixed :class:`~ladder.config.PriorSpec`."""
    import numpyro.distributions as dist
    from numpyro.distributions import constraints

    p = dict(spec.params)
    if spec.dist == "normal":
        d = dist.Normal(p["loc"], p["scale"])
    elif spec.dist == "halfnormal":
        d = dist.HalfNormal(p["scale"])
    elif spec.dist == "uniform":
        d = dist.Uniform(p["low"], p["high"])
    elif spec.dist == "flat":
        return dist.ImproperUniform(constraints.real, tuple(shape), event_shape=())
    else:
        raise ValueError(f"no distribution for prior {spec.dist!r}")
    return d.expand(tuple(shape)) if shape else d


def sample_parameter(name, spec, shape=()):
    """A numpyro site for parameter ``name``; a ``fixed`` prior gives the constant (no site)."""
    import jax.numpy as jnp
    import numpyro

    if spec.dist == "fixed":
        value = jnp.asarray(spec.get("value"))
        return jnp.broadcast_to(value, shape) if shape else value
    return numpyro.sample(name, prior_distribution(spec, shape))
