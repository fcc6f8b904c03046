"""``outputs.reference_agent`` and ``outputs.break_even.learner`` name agents of the sweep by label: a
label that names none is refused before any run, naming the field, the label and the spec's labels
(with a did-you-mean when one is close); a label that names one is used."""

from __future__ import annotations

import copy
import difflib
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
import yaml

from shortcut_gym.lab.sweep.plan import plan_runs
from shortcut_gym.lab.sweep.runner import run_sweep
from shortcut_gym.lab.sweep.spec import SweepSpecError, load_spec, parse_spec

BASE: dict[str, Any] = {
    "name": "role_labels",
    "base": {"schedule": {"sessions": 1, "trials_per_session": 6}},
    "vary": {"design": "grid", "parameters": {"costs.klm.keystroke_s": {"values": [0.1, 0.3]},
                                              "costs.learn.encoding_s": {"values": [1.0, 4.0]}}},
    "agents": [{"name": "always_menu"}, {"name": "learn_first_k", "params": {"k": 1}},
               {"name": "always_hotkey", "label": "keys"}],
    "seeds": {"first": 0, "count": 1},
}
LABELS = ["always_menu", "learn_first_k(k=1)", "keys"]
MAP = {"x": "costs.klm.keystroke_s", "y": "costs.learn.encoding_s"}


def _spec(reference: str | None = None, learner: str | None = None, plots: bool = False) -> dict[str, Any]:
    spec = copy.deepcopy(BASE)
    outputs: dict[str, Any] = {"plots": plots}  # the break-even map is drawn with the plots
    if reference is not None:
        outputs["reference_agent"] = reference
    if learner is not None:
        outputs["break_even"] = {**MAP, "learner": learner}
    spec["outputs"] = outputs
    return spec


def _field_label(field: str, label: str) -> dict[str, Any]:
    return _spec(reference=label) if field == "outputs.reference_agent" else _spec(learner=label)


FIELDS = ["outputs.reference_agent", "outputs.break_even.learner"]
#: labels naming no agent: a typo of one (a did-you-mean expected) and ones close to none
WRONG = ["keyz", "learn_first_k(k=2)", "always_men", "bounded_optimal", "nobody at all", "KEYS"]


@pytest.mark.parametrize("field", FIELDS)
@pytest.mark.parametrize("label", WRONG)
def test_a_label_naming_no_agent_is_refused_before_any_run(tmp_path: Path, field: str, label: str) -> None:
    out = tmp_path / "sweep"
    with pytest.raises(SweepSpecError) as err:
        run_sweep(_field_label(field, label), out, progress=False)
    text = str(err.value)
    assert f"{field}: " in text and repr(label) in text, text
    assert str(LABELS) in text, text
    close = difflib.get_close_matches(label, LABELS, n=1)  # what a did-you-mean should offer
    if close:
        assert text.endswith(f"did you mean {close[0]!r}?"), text
    else:
        assert "did you mean" not in text, text
    assert not out.exists()  # nothing written: no run started


@pytest.mark.parametrize("field", FIELDS)
def test_the_file_is_named_and_cli_agents_are_the_labels(tmp_path: Path, field: str) -> None:
    path = tmp_path / "spec.yaml"
    path.write_text(yaml.safe_dump(_field_label(field, "keys")))
    plan_runs(load_spec(path), str(path))  # 'keys' is one of the file's agents
    others = [{"name": "always_menu", "label": "menu"}, {"name": "always_hotkey", "label": "hotkey"}]
    with pytest.raises(SweepSpecError) as err:  # the agents given instead (as --agent does) lack it
        plan_runs(load_spec(path, agents=others), str(path))
    text = str(err.value)
    assert text.startswith(f"{path}: {field}: 'keys'") and "['menu', 'hotkey']" in text, text


@pytest.mark.parametrize("field", FIELDS)
@pytest.mark.parametrize("label", LABELS)
def test_a_label_naming_an_agent_plans(field: str, label: str) -> None:
    runs = plan_runs(parse_spec(_field_label(field, label)))
    assert sorted({r["label"] for r in runs}) == sorted(LABELS)


def test_the_named_agents_are_the_ones_used(tmp_path: Path) -> None:
    spec = _spec(reference="keys", learner="keys", plots=True)
    run_sweep(spec, tmp_path / "s", progress=False)
    summary = pd.read_csv(tmp_path / "s" / "summary.csv")
    results = pd.read_parquet(tmp_path / "s" / "results.parquet")
    assert (summary.loc[summary["agent"] == "keys", "gap_to_reference_s"].abs() < 1e-9).all()
    menu = summary[summary["agent"] == "always_menu"].set_index("point_index")["total_time_s"]
    keys = summary[summary["agent"] == "keys"].set_index("point_index")["total_time_s"]
    gap = summary[summary["agent"] == "always_menu"].set_index("point_index")["gap_to_reference_s"]
    pd.testing.assert_series_equal(gap, menu - keys, check_names=False)
    assert len(results) == 4 * len(LABELS)
    assert "the simulated verdict of keys" in (tmp_path / "s" / "index.md").read_text()  # the map's learner
