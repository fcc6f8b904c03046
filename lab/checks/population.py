"""Population specs: per model, a distribution for each parameter, for simulation and recovery.

A YAML file (or dict) of this form::

    models:
      rw:                          # a label of your own (or the agent's name)
        agent: rescorla_wagner     # registered agent; default: the label
        options: {}                # constructor options, e.g. mechanisms: [value, lapse]
        participants: 20           # simulated participants of this model (simulate --population)
        parameters:
          alpha: {dist: uniform, low: 0.1, high: 0.9}
          beta: {dist: lognormal, mu: 0.0, sigma: 0.7}   # mu, sigma of ln(beta)
          # a plain number holds the parameter fixed at that value

Distributions: ``uniform`` (low, high), ``loguniform`` (low, high > 0), ``normal`` (mean, sd),
``lognormal`` (mu, sigma of the log), ``logitnormal`` (mean, sd of the parameter's own logit
coordinate, for a parameter with two-sided bounds). Draws outside the parameter's bounds are
drawn again (truncation; at most 1,000 tries, else an error naming the parameter). A free
parameter not listed is drawn over its documented plausible range (``ParamSpec.plausible``),
uniformly in the optimiser's coordinate. Every fault names the file and the field.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from shortcut_gym.agents.base import ParamSpec
from shortcut_gym.envs.config import read_yaml
from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.fitting import ModelSpec, draw_in_range, plausible_range

#: distribution -> its numbers
DISTRIBUTIONS: dict[str, tuple[str, ...]] = {
    "uniform": ("low", "high"), "loguniform": ("low", "high"), "normal": ("mean", "sd"),
    "lognormal": ("mu", "sigma"), "logitnormal": ("mean", "sd"),
}
MAX_TRIES = 1000
#: distribution -> what its numbers mean (the config reference page is generated from this)
DISTRIBUTION_MEANINGS: dict[str, str] = {
    "uniform": "uniform on [low, high], within the parameter's bounds",
    "loguniform": "log-uniform on [low, high], 0 < low",
    "normal": "normal with mean and sd (sd > 0), redrawn outside the bounds",
    "lognormal": "exp of a normal: mu and sigma (> 0) of the log, redrawn outside the bounds",
    "logitnormal": "the parameter's own logit coordinate is normal (mean, sd > 0); two-sided bounds only",
}
#: key of a model entry -> (type, default, meaning); the keys the reader accepts
MODEL_FIELDS: dict[str, tuple[str, str, str]] = {
    "agent": ("text", "the model's label", "registered agent name (`shortcut-gym simulate --help` lists them)"),
    "options": ("mapping", "{}", "constructor options of the agent, e.g. `mechanisms: [value, lapse]` for "
                "composed_learner"),
    "participants": ("whole number 1..100000", "10", "simulated participants of this model"),
    "parameters": ("mapping", "{}", "parameter -> a plain number (held fixed) or {dist: NAME, ...numbers}; "
                   "a free parameter not listed is drawn over its plausible range"),
}


@dataclass(frozen=True)
class ParameterLaw:
    """How one parameter is drawn: a distribution with its numbers, or a fixed value."""

    dist: str
    numbers: tuple[float, ...] = ()

    def describe(self) -> str:
        """E.g. 'uniform(low=0.1, high=0.9)' or 'fixed 0.3'."""
        if self.dist == "fixed":
            return f"fixed {self.numbers[0]:g}"
        names = DISTRIBUTIONS.get(self.dist, ())
        return f"{self.dist}(" + ", ".join(f"{n}={v:g}" for n, v in zip(names, self.numbers, strict=True)) + ")"

    def draw(self, s: ParamSpec, rng: np.random.Generator, where: str) -> float:
        """One value within the bounds of ``s``."""
        if self.dist == "fixed":
            return self.numbers[0]
        a, b = self.numbers
        for _ in range(MAX_TRIES):
            if self.dist == "uniform":
                v = rng.uniform(a, b)
            elif self.dist == "loguniform":
                v = math.exp(rng.uniform(math.log(a), math.log(b)))
            elif self.dist == "normal":
                v = rng.normal(a, b)
            elif self.dist == "lognormal":
                v = math.exp(rng.normal(a, b))
            else:
                v = s.from_free(rng.normal(a, b))
            if s.lower <= v <= s.upper:
                return float(v)
        raise ConfigError(f"{where}: {self.describe()} gave no value within [{s.lower}, {s.upper}] in {MAX_TRIES} "
                          "draws")


@dataclass(frozen=True)
class ModelPopulation:
    """One model of a population spec: what to simulate, how many, and how its parameters are drawn."""

    spec: ModelSpec
    participants: int
    laws: Mapping[str, ParameterLaw] = field(default_factory=dict)
    source: str = "population spec"

    def draw(self, rng: np.random.Generator) -> dict[str, float]:
        """True values of every free parameter of the model (listed laws, else the plausible range)."""
        specs = self.spec.build().param_specs()
        return {n: (self.laws[n].draw(specs[n], rng, f"{self.source}: models.{self.spec.label}.parameters.{n}")
                    if n in self.laws else draw_in_range(specs[n], rng))
                for n in self.spec.free_parameters()}

    def describe(self) -> dict[str, str]:
        """Parameter -> how it is drawn, in words (for reports)."""
        specs = self.spec.build().param_specs()
        out = {}
        for n in self.spec.free_parameters():
            if n in self.laws:
                out[n] = self.laws[n].describe()
            else:
                lo, hi = plausible_range(specs[n])
                how = "log-uniform" if specs[n].transform == "log" else (
                    "logit-uniform" if specs[n].transform == "logit" else "uniform")
                out[n] = f"{how} over the plausible range [{lo:g}, {hi:g}]"
        return out


def _number(value: Any, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(float(value)):
        raise ConfigError(f"{where}: must be a finite number, got {value!r}")
    return float(value)


def _law(value: Any, s: ParamSpec, where: str) -> ParameterLaw:
    if not isinstance(value, dict):
        v = _number(value, where)
        s.check(v, where)
        return ParameterLaw("fixed", (v,))
    dist = value.get("dist")
    if dist not in DISTRIBUTIONS:
        raise ConfigError(f"{where}.dist: {dist!r} is not one of {sorted(DISTRIBUTIONS)} (or give a plain number)")
    names = DISTRIBUTIONS[dist]
    extra = sorted(set(value) - {"dist", *names})
    missing = [n for n in names if n not in value]
    if extra or missing:
        raise ConfigError(f"{where}: {dist} takes {list(names)}; " + (f"unknown {extra}" if extra else
                                                                       f"missing {missing}"))
    a, b = (_number(value[n], f"{where}.{n}") for n in names)
    if dist in ("uniform", "loguniform"):
        if not a < b or a < s.lower or b > s.upper:
            raise ConfigError(f"{where}: need low < high within the bounds [{s.lower}, {s.upper}], got {a:g}, {b:g}")
        if dist == "loguniform" and a <= 0:
            raise ConfigError(f"{where}.low: loguniform needs low > 0, got {a:g}")
    elif b <= 0:
        raise ConfigError(f"{where}.{names[1]}: must be > 0, got {b:g}")
    if dist == "logitnormal" and s.transform != "logit":
        raise ConfigError(f"{where}: logitnormal needs a parameter bounded on both sides; {s.name} is not")
    return ParameterLaw(dist, (a, b))


def read_population(source: str | Path | Mapping[str, Any]) -> list[ModelPopulation]:
    """Validated population spec from a YAML path or a dict; faults name the file and the field."""
    where = str(source) if isinstance(source, (str, Path)) else "population spec"
    data = read_yaml(Path(source)) if isinstance(source, (str, Path)) else source
    if isinstance(data, Mapping) and set(data) - {"models"}:
        raise ConfigError(f"{where}: unknown key(s) {sorted(set(data) - {'models'})}; a population spec "
                          "is a mapping with one key 'models'")
    if not isinstance(data, Mapping) or set(data) != {"models"} or not isinstance(data["models"], Mapping) \
            or not data["models"]:
        raise ConfigError(f"{where}: a population spec is a mapping with one key 'models' holding at least one "
                          "model (label: {agent, options, participants, parameters})")
    out = []
    for label, body in data["models"].items():
        at = f"{where}: models.{label}"
        body = body or {}
        if not isinstance(body, Mapping):
            raise ConfigError(f"{at}: must be a mapping, got {body!r}")
        extra = sorted(set(body) - set(MODEL_FIELDS))
        if extra:
            raise ConfigError(f"{at}: unknown key(s) {extra}; known: {', '.join(MODEL_FIELDS)}")
        options = body.get("options") or {}
        if not isinstance(options, Mapping):
            raise ConfigError(f"{at}.options: must be a mapping, got {options!r}")
        try:
            spec = ModelSpec(str(body.get("agent", label)), str(label), dict(options))
            specs = spec.build().param_specs()
        except (ConfigError, ValueError) as err:
            raise ConfigError(f"{at}: {err}") from None
        n = body.get("participants", 10)
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= 100_000:
            raise ConfigError(f"{at}.participants: must be a whole number 1..100000, got {n!r}")
        params = body.get("parameters") or {}
        if not isinstance(params, Mapping):
            raise ConfigError(f"{at}.parameters: must be a mapping, got {params!r}")
        unknown = sorted(set(params) - set(specs))
        if unknown:
            raise ConfigError(f"{at}.parameters: unknown parameter(s) {unknown}; {label} has {list(specs)}")
        laws = {p: _law(v, specs[p], f"{at}.parameters.{p}") for p, v in params.items()}
        out.append(ModelPopulation(spec, n, laws, where))
    return out


def default_population(spec: ModelSpec, participants: int) -> ModelPopulation:
    """Every free parameter over its plausible range (what ``recover`` does without a population spec)."""
    return ModelPopulation(spec, participants, {}, "plausible ranges")
