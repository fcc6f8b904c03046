"""Interval ends that reach the end of the optimiser's box are reported as the parameter's bound.

The optimiser keeps a logit coordinate within +-30, whose natural values are 9.4e-14 (0..1) or
4.7e-12 (0..50) rather than 0: an interval end there is written as the bound itself. Checked on
quadratic -ln L in the transformed coordinate (closed form: Wald and profile ends at
x +- 1.96 sd, mapped back) for every kind of transform, and end to end in fits.csv and
parameters.csv.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from shortcut_gym.agents.base import ParamSpec
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.fitting.optimise import _uncertainty, free_box, interval_ends
from shortcut_gym.lab.fitting.uncertainty import Z95

SPECS = [
    ParamSpec("rate", 0.3, 0.0, 1.0, "logit"),
    ParamSpec("weight", 3.0, 0.0, 50.0, "logit"),
    ParamSpec("shifted", 0.5, -2.0, 2.0, "logit"),
    ParamSpec("scale", 1.0, 0.0, math.inf, "log"),
    ParamSpec("floor2", 3.0, 2.0, math.inf, "log"),
    ParamSpec("boxed", 0.0, -3.0, 3.0, "none"),
    ParamSpec("free", 0.0, -math.inf, math.inf, "none"),
]
IDS = [s.name for s in SPECS]


def _quadratic(centre: float, sd: float):
    """-ln L = 0.5 ((x - centre) / sd)^2 in the transformed coordinate."""
    return lambda x: 0.5 * float((x[0] - centre) / sd) ** 2


def _centre(box: tuple[float, float]) -> float:
    return 0.5 * (box[0] + box[1])


@pytest.mark.parametrize("method", ["wald", "profile"])
@pytest.mark.parametrize("spec", SPECS, ids=IDS)
def test_a_flat_likelihood_gives_the_bounds_themselves(spec: ParamSpec, method: str) -> None:
    box = free_box(spec)
    sd = 10.0 * (box[1] - box[0])  # the 95% interval runs far past both ends of the box
    x = np.array([_centre(box)])
    _, lower, upper = _uncertainty(_quadratic(x[0], sd), x, [spec.name], {spec.name: spec}, [box], (), method, [])
    assert lower[spec.name] == spec.lower and upper[spec.name] == spec.upper


@pytest.mark.parametrize("method", ["wald", "profile"])
@pytest.mark.parametrize("spec", SPECS, ids=IDS)
def test_an_interior_interval_is_the_closed_form(spec: ParamSpec, method: str) -> None:
    box = free_box(spec)
    sd = 0.02 * (box[1] - box[0])
    centre = _centre(box) + 0.1 * (box[1] - box[0])
    x = np.array([centre])
    _, lower, upper = _uncertainty(_quadratic(centre, sd), x, [spec.name], {spec.name: spec}, [box], (), method, [])
    lo, hi = spec.from_free(centre - Z95 * sd), spec.from_free(centre + Z95 * sd)
    # Wald: sd from the numerical Hessian (relative error ~1e-9); profile: root to xtol 1e-6 in x
    rel = 1e-7 if method == "wald" else 1e-5
    assert lower[spec.name] == pytest.approx(lo, rel=rel, abs=rel)
    assert upper[spec.name] == pytest.approx(hi, rel=rel, abs=rel)
    assert spec.lower < lower[spec.name] < upper[spec.name] < spec.upper


@pytest.mark.parametrize("method", ["wald", "profile"])
@pytest.mark.parametrize("spec", SPECS, ids=IDS)
def test_one_side_reaching_the_box_keeps_the_other_side_computed(spec: ParamSpec, method: str) -> None:
    box = free_box(spec)
    sd = 0.01 * (box[1] - box[0])
    centre = box[0] + 1.0 * sd  # the lower end runs past the box, the upper one does not
    x = np.array([centre])
    _, lower, upper = _uncertainty(_quadratic(centre, sd), x, [spec.name], {spec.name: spec}, [box], (), method, [])
    assert lower[spec.name] == spec.lower
    hi = spec.from_free(centre + Z95 * sd)
    rel = 1e-7 if method == "wald" else 1e-5
    assert upper[spec.name] == pytest.approx(hi, rel=rel, abs=rel)


@pytest.mark.parametrize("spec", SPECS, ids=IDS)
def test_interval_ends_map_the_box_ends_and_nothing_else(spec: ParamSpec) -> None:
    box = free_box(spec)
    assert interval_ends(spec, box[0], box[1], box) == (spec.lower, spec.upper)
    assert interval_ends(spec, box[0] - 5.0, box[1] + 5.0, box) == (spec.lower, spec.upper)
    inside = box[0] + 1e-3 * (box[1] - box[0])  # near the end but not at it: computed
    assert interval_ends(spec, inside, _centre(box), box) == (spec.from_free(inside), spec.from_free(_centre(box)))


def test_fits_and_parameters_tables_write_bounds_not_box_ends(tmp_path: Path) -> None:
    log = tmp_path / "log.csv"
    assert main(["simulate", "--agent", "choice_kernel:alpha_ck=0.3,beta_ck=3", "--agent",
                 "rescorla_wagner:alpha=0.4,beta=2", "--users", "2", "--sessions", "2", "--seed", "3",
                 "--log", str(log), "--out", str(tmp_path / "sim")]) == 0
    out = tmp_path / "fits"
    assert main(["fit", str(log), "--sessions", "2", "--model", "rescorla_wagner", "--model", "choice_kernel",
                 "--starts", "2", "--seed", "3", "--intervals", "profile", "--out", str(out), "--quiet"]) == 0
    params = pd.read_csv(out / "parameters.csv")
    fits = pd.read_csv(out / "fits.csv").set_index(["participant", "model"])
    bounds = {"alpha": (0.0, 1.0), "beta": (0.0, 50.0), "alpha_ck": (0.0, 1.0), "beta_ck": (0.0, 50.0)}
    at_bound_ends = 0
    for _, r in params.iterrows():
        lo_b, hi_b = bounds[r["parameter"]]
        width = hi_b - lo_b
        for value, bound in ((r["lower"], lo_b), (r["upper"], hi_b)):
            assert not (0 < abs(value - bound) < 1e-9 * width), (r.to_dict(), value)  # no 9.4e-14 or 4.7e-12
            at_bound_ends += value == bound
        wide = fits.loc[(r["participant"], r["model"])]
        assert wide[f"lower_{r['parameter']}"] == r["lower"] and wide[f"upper_{r['parameter']}"] == r["upper"]
    assert at_bound_ends >= 3  # the case under test occurs: intervals running to a bound
