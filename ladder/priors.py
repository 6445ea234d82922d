"""Run-file prior specifications -> numpyro sample sites."""

from __future__ import annotations

__all__ = ["sample_parameter", "prior_distribution", "prior_log_density"]


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


def prior_log_density(spec, value):
    """ln p(value) of a non-fixed :class:`~ladder.config.PriorSpec`, with jax alone (no numpyro: the grid of
    :mod:`ladder.sampling` evaluates its hyperparameters' priors without importing it, ~1.6 s of a fit's start).
    The same densities as :func:`prior_distribution`'s ``log_prob`` inside the support (checked in
    tests/test_methods.py against scipy.stats and numpyro), and -inf outside it (a uniform prior's bounds)."""
    import jax.numpy as jnp
    from jax.scipy.stats import norm

    p = dict(spec.params)
    value = jnp.asarray(value)
    if spec.dist == "normal":
        return norm.logpdf(value, p["loc"], p["scale"])
    if spec.dist == "halfnormal":
        return jnp.where(value >= 0, jnp.log(2.0) + norm.logpdf(value, 0.0, p["scale"]), -jnp.inf)
    if spec.dist == "uniform":
        inside = (value >= p["low"]) & (value <= p["high"])
        return jnp.where(inside, -jnp.log(p["high"] - p["low"]), -jnp.inf)
    if spec.dist == "flat":
        return jnp.zeros_like(value, dtype=float)
    raise ValueError(f"no density for prior {spec.dist!r}")


def sample_parameter(name, spec, shape=()):
    """A numpyro site for parameter ``name``; a ``fixed`` prior gives the constant (no site)."""
    import jax.numpy as jnp
    import numpyro

    if spec.dist == "fixed":
        value = jnp.asarray(spec.get("value"))
        return jnp.broadcast_to(value, shape) if shape else value
    return numpyro.sample(name, prior_distribution(spec, shape))
