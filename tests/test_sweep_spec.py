"""Sweep specs: designs, dotted-path overrides, and clear errors for bad input with nothing written."""

from __future__ import annotations

import copy
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import yaml

from shortcut_gym.lab.sweep.design import design_points
from shortcut_gym.lab.sweep.plan import plan_runs, world_from_settings
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import SweepSpecError, load_spec, parse_spec

GOOD: dict[str, Any] = {
    "name": "spec_test",
    "base": {"schedule": {"sessions": 2, "trials_per_session": 8}},
    "vary": {"design": "grid", "parameters": {
        "costs.klm.keystroke_s": {"values": [0.1, 0.5]},
        "costs.learn.encoding_s": {"low": 1.0, "high": 16.0, "steps": 3, "scale": "log"},
    }},
    "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}}],
    "seeds": {"first": 0, "count": 2},
}


def _with(path: str, value: Any) -> dict[str, Any]:
    spec = copy.deepcopy(GOOD)
    node = spec
    keys = path.split("/")
    for key in keys[:-1]:
        node = node[int(key)] if isinstance(node, list) else node[key]
    node[keys[-1]] = value
    return spec


def test_grid_points_runs_and_overrides() -> None:
    spec = parse_spec(GOOD)
    points = design_points(spec.vary)
    assert len(points) == 6
    assert [p["costs.learn.encoding_s"] for p in points[:3]] == pytest.approx([1.0, 4.0, 16.0])
    assert points[0]["costs.klm.keystroke_s"] == 0.1 and points[3]["costs.klm.keystroke_s"] == 0.5
    runs = plan_runs(spec)
    assert len(runs) == 12 and len({r["run_id"] for r in runs}) == 12
    world = world_from_settings(runs[-1]["settings"])
    assert world.costs.klm.k_s == 0.5 and world.costs.learn.encoding_s == pytest.approx(16.0)
    assert world.horizon == 16
    # the same spec plans the same ids; a changed value changes them
    assert [r["run_id"] for r in plan_runs(parse_spec(GOOD))] == [r["run_id"] for r in runs]
    other = plan_runs(parse_spec(_with("vary/parameters/costs.klm.keystroke_s", {"values": [0.1, 0.6]})))
    assert other[-1]["run_id"] != runs[-1]["run_id"]


def test_random_and_latin_hypercube_designs_are_seeded_and_stratified() -> None:
    spec = _with("vary", {"design": "lhs", "points": 10, "seed": 3, "parameters": {
        "costs.klm.keystroke_s": {"low": 0.08, "high": 1.2},
        "memory.threshold": {"low": -5.0, "high": -2.0},
        "costs.klm.typist": {"values": ["best_typist", "worst_typist"]},
    }})
    pts = design_points(parse_spec(spec).vary)
    assert pts == design_points(parse_spec(spec).vary)
    for path, lo, hi in (("costs.klm.keystroke_s", 0.08, 1.2), ("memory.threshold", -5.0, -2.0)):
        u = (np.array([p[path] for p in pts]) - lo) / (hi - lo)
        assert sorted(np.floor(u * 10).astype(int).tolist()) == list(range(10))  # one point per stratum
    assert {p["costs.klm.typist"] for p in pts} == {"best_typist", "worst_typist"}
    rnd = _with("vary", {"design": "random", "points": 50, "seed": 1, "parameters": {
        "costs.learn.encoding_s": {"low": 0.5, "high": 50.0, "scale": "log"}}})
    vals = np.array([p["costs.learn.encoding_s"] for p in design_points(parse_spec(rnd).vary)])
    assert vals.min() >= 0.5 and vals.max() <= 50.0 and np.median(vals) < 10  # log-uniform median 5
    rnd2 = copy.deepcopy(rnd)
    rnd2["vary"]["seed"] = 2
    assert design_points(parse_spec(rnd2).vary) != design_points(parse_spec(rnd).vary)


BAD = [
    ("seeds", {"count": 0}, r"seeds.*greater than or equal to 1"),
    ("vary/design", "sobol", r"vary\.design"),
    ("vary/parameters/costs.klm.keystroke_s", {"values": []}, r"costs\.klm\.keystroke_s.*values is empty"),
    ("vary/parameters/costs.klm.keystroke_s", {"low": 0.1}, r"keystroke_s.*both low and high"),
    ("vary/parameters/costs.klm.keystroke_s", {"values": [0.1, -1.0]},
     r"vary point 3 \(costs\.klm\.keystroke_s=-1\.0.*klm\.keystroke_s.*greater than 0"),
    ("vary/parameters/costs.klm.keystrok_s", {"values": [0.1]},
     r"vary\.parameters\.costs\.klm\.keystrok_s: unknown setting 'keystrok_s' under costs\.klm"),
    ("vary/parameters/world.speed", {"values": [1]}, r"world\.speed: a dotted path starts with one of"),
    ("vary/parameters/costs.klm", {"values": [1]}, r"costs\.klm: 'costs\.klm' is a group of settings"),
    ("agents/1/name", "no_such_agent", r"agents\[1\]: .*unknown agent 'no_such_agent'"),
    ("agents/1/params", {"kk": 2}, r"agents\[1\]: unknown key 'kk' under params \(.*parameters of"),
    ("agents/1/params", {"k": -1}, r"agents\[1\]: learn_first_k: parameter k=-1(\.0)? is outside"),
    ("agents/1/parms", {"k": 2}, r"agents\[1\]: unknown key 'parms' \(spec fields: .*; did you mean 'params'\?$"),
    ("vary/points", 5, r"vary: .*points applies to the random and lhs designs only"),
    ("outputs", {"break_even": {"x": "costs.klm.keystroke_s", "y": "memory.decay"}},
     r"outputs\.break_even\.y: 'memory\.decay' is not a varied parameter"),
    ("colour", "blue", r"colour: unknown key"),
]


@pytest.mark.parametrize(("path", "value", "message"), BAD, ids=[b[0] + "=" + str(b[1])[:20] for b in BAD])
def test_bad_spec_errors_name_the_field_and_write_nothing(tmp_path: Path, path: str, value: Any,
                                                          message: str) -> None:
    spec = _with(path, value)
    out = tmp_path / "sweep"
    with pytest.raises(SweepSpecError, match=message):
        run_sweep(spec, out, progress=False)
    assert not out.exists()


def test_yaml_errors_name_the_file(tmp_path: Path) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text("name: x\nagents: [ {name: always_menu}\n")
    with pytest.raises(SweepSpecError, match=r"bad\.yaml: not valid YAML"):
        load_spec(bad)
    bad.write_text(yaml.safe_dump({**GOOD, "seeds": [1, 1]}))
    with pytest.raises(SweepSpecError, match=r"bad\.yaml: seeds: .*repeats a seed"):
        load_spec(bad)


def test_folder_of_another_sweep_or_stray_files_is_refused(tmp_path: Path) -> None:
    spec = _with("vary/parameters", {"costs.klm.keystroke_s": {"values": [0.2]}})
    run_sweep(spec, tmp_path / "a", progress=False)
    other = _with("vary/parameters", {"costs.klm.keystroke_s": {"values": [0.3]}})
    before = sorted(p.name for p in (tmp_path / "a" / "runs").iterdir())
    with pytest.raises(SweepSpecError, match="holds another sweep"):
        run_sweep(other, tmp_path / "a", progress=False)
    assert sorted(p.name for p in (tmp_path / "a" / "runs").iterdir()) == before
    (tmp_path / "b").mkdir()
    (tmp_path / "b" / "notes.txt").write_text("mine")
    with pytest.raises(SweepSpecError, match="not empty"):
        run_sweep(spec, tmp_path / "b", progress=False)
    assert sorted(p.name for p in (tmp_path / "b").iterdir()) == ["notes.txt"]


def test_cli_bad_input_exits_2_naming_the_fault(tmp_path: Path) -> None:
    spec = tmp_path / "s.yaml"
    spec.write_text(yaml.safe_dump(_with("vary/parameters/costs.klm.keystrok_s", {"values": [0.1]})))
    cmd = [sys.executable, "-m", "shortcut_gym", "sweep", str(spec), "--out", str(tmp_path / "o")]
    res = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert res.returncode == 2
    assert "unknown setting 'keystrok_s'" in res.stderr and "s.yaml" in res.stderr
    assert not (tmp_path / "o").exists()
    res = subprocess.run(cmd[:4] + [str(tmp_path / "missing.yaml"), "--workers", "0"], capture_output=True,
                         text=True, timeout=120)
    assert res.returncode == 2 and "--workers" in res.stderr


def test_every_bundled_sweep_spec_validates_and_plans() -> None:
    from shortcut_gym.envs.config import bundled_config_dir

    specs = sorted((bundled_config_dir() / "sweeps").glob("*.yaml"))
    assert len(specs) >= 2
    for path in specs:
        spec = load_spec(path)
        runs = plan_runs(spec, str(path))
        assert len(runs) == len(design_points(spec.vary)) * len(spec.agents)
    assert load_spec("typing_vs_learning").name == "typing_vs_learning"  # a bare name finds the bundled spec
