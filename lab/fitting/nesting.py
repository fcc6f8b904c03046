"""Nested models: when a model equals another one at some of its parameter values.

A model B nests a model A when every A is a B with some of B's parameters set to values that
switch B's extra parts off. Then the best fit of B can be no worse than A's, and the fitter
starts B from A's best parameters (plus the off values) so that it never reports otherwise.

Known nestings:
* learning models (published or composed): A's mechanisms are a subset of B's, every extra
  mechanism has off values (``Mechanism.off``), same fixed options;
* static softmax: A's covariates are a subset of B's, the extra weights set to 0.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from shortcut_gym.agents.base import Agent
from shortcut_gym.agents.learning import MECHANISMS, LearningAgent
from shortcut_gym.agents.static_softmax import StaticSoftmax
from shortcut_gym.lab.fitting.specs import ModelSpec


def _switch_off(inner: Agent, outer: Agent) -> dict[str, float] | None:
    """Values of ``outer``'s extra parameters that make it equal ``inner`` (None: it does not nest it)."""
    if isinstance(inner, LearningAgent) and isinstance(outer, LearningAgent):
        if inner.options != outer.options or not set(inner.mechanisms) <= set(outer.mechanisms):
            return None
        values: dict[str, float] = {}
        for m in outer.mechanisms:
            if m in inner.mechanisms:
                continue
            off = MECHANISMS[m].off
            if off is None:
                return None
            values.update(dict(off))
        return values
    if isinstance(inner, StaticSoftmax) and isinstance(outer, StaticSoftmax):
        if not set(inner.covariates) <= set(outer.covariates):
            return None
        return {n: 0.0 for n in outer.param_specs() if n not in inner.param_specs()}
    return None


def nested_start(inner: ModelSpec, inner_params: Mapping[str, float], outer: ModelSpec) -> dict[str, float] | None:
    """Start of ``outer`` (its free parameters, natural units) at which it equals ``inner`` at
    ``inner_params`` (all of inner's parameters), or None when ``outer`` does not nest ``inner``.

    Fixed values must agree: a parameter fixed in ``outer`` must have that value in ``inner``'s fit
    (or be one of the off values), else the nesting does not hold for this pair of specs.
    """
    if inner.to_dict() == outer.to_dict():
        return None
    a, b = inner.build(), outer.build()
    off = _switch_off(a, b)
    if off is None:
        return None
    b_specs = b.param_specs()
    values: dict[str, Any] = {}
    for name, spec in b_specs.items():
        if name in off:
            values[name] = off[name]
        elif name in inner_params:
            values[name] = float(inner_params[name])
        else:
            values[name] = spec.default  # a parameter without effect when its mechanism is off
    for name, fixed in outer.fixed.items():
        if abs(values[name] - fixed) > 1e-12:
            return None
    return {n: min(max(v, b_specs[n].lower), b_specs[n].upper) for n, v in values.items() if n not in outer.fixed}


def nesting_order(specs: list[ModelSpec]) -> list[int]:
    """Indices of ``specs`` in an order that fits every nested model before the models nesting it
    (fewer free parameters first; ties in the given order)."""
    return sorted(range(len(specs)), key=lambda j: (len(specs[j].free_parameters()), j))
