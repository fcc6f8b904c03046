"""``shortcut-gym sweep --plan-folder``: where the workers' shared plans go (or none), checked like other outputs."""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from shortcut_gym.agents.planner import cache
from shortcut_gym.lab.cli import main

SPEC = {"name": "plan_folder_cli", "base": {"schedule": {"sessions": 2, "trials_per_session": 8, "gap_h": 5.0}},
        "vary": {"design": "grid", "parameters": {"memory.threshold": {"values": [-3.0, -2.4]}}},
        "agents": [{"name": "bounded_optimal", "params": {"n_bins": 6, "n_weight_bins": 3}}, {"name": "always_menu"}],
        "seeds": {"first": 1, "count": 2}, "outputs": {"plots": False}}


def _spec_file(tmp_path: Path) -> Path:
    path = tmp_path / "spec.yaml"
    path.write_text(json.dumps(SPEC))  # JSON is YAML
    return path


def _sweep(tmp_path: Path, out: str, *extra: str) -> int:
    cache.clear_plans()  # each call plans afresh, so where the plans go is seen
    return main(["sweep", str(_spec_file(tmp_path)), "--out", str(tmp_path / out), "--quiet", "--workers", "1",
                 *extra])


def _results(folder: Path) -> pd.DataFrame:
    return pd.read_parquet(folder / "results.parquet")


def test_the_plans_go_to_the_default_place_a_named_folder_or_nowhere_and_results_do_not_change(tmp_path: Path,
                                                                                                capsys) -> None:
    assert _sweep(tmp_path, "default", "--keep-plans") == 0
    assert len(list((tmp_path / "default" / "plans").glob("*.plan"))) == 2  # one per world
    assert _sweep(tmp_path, "removed") == 0
    assert "removed the sweep's plans" in capsys.readouterr().err
    assert not (tmp_path / "removed" / "plans").exists()
    shared = tmp_path / "shared" / "deeper"
    assert _sweep(tmp_path, "named", "--plan-folder", str(shared)) == 0
    assert len(list(shared.glob("*.plan"))) == 2 and not (tmp_path / "named" / "plans").exists()
    for word in ("none", "NONE"):
        assert _sweep(tmp_path, f"off_{word}", "--plan-folder", word) == 0
        assert not (tmp_path / f"off_{word}" / "plans").exists() and not Path(word).exists()
    assert "2 plan(s) made, 0 read from the plan store" in capsys.readouterr().err
    # a second sweep on the named folder reads both plans and makes none
    assert _sweep(tmp_path, "named_again", "--plan-folder", str(shared)) == 0
    assert "0 plan(s) made, 2 read from the plan store" in capsys.readouterr().err
    base = _results(tmp_path / "default")
    for other in ("removed", "named", "off_none", "off_NONE", "named_again"):
        pd.testing.assert_frame_equal(base, _results(tmp_path / other), check_exact=True)


def test_a_folder_named_none_is_given_with_a_path(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert _sweep(tmp_path, "s", "--plan-folder", "./none") == 0
    assert len(list((tmp_path / "none").glob("*.plan"))) == 2


@pytest.mark.parametrize(("make", "value", "expected"), [
    ("file", "{f}", "is a file, not a folder"),
    ("file", "{f}/inside", "lies under the file"),
    (None, "", "an empty path"),
    (None, "{out}", "it is the sweep folder"),
    (None, "{out}/runs/x", "lies under its runs/"),
])
def test_a_bad_plan_folder_exits_2_naming_it_before_anything_is_written(tmp_path: Path, capsys, make, value,
                                                                        expected) -> None:
    blocker = tmp_path / "a_file"
    if make == "file":
        blocker.write_text("not a folder")
    out = tmp_path / "out"
    argv = ["sweep", str(_spec_file(tmp_path)), "--out", str(out), "--quiet", "--workers", "1",
            "--plan-folder", value.format(f=blocker, out=out)]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and expected in err and "Traceback" not in err, err
    assert not out.exists()


@pytest.mark.parametrize(("extra", "expected"), [
    (["--keep-plans", "--plan-folder", "elsewhere"], "--keep-plans applies to the default <out>/plans only"),
    (["--keep-plans", "--plan-folder", "none"], "--keep-plans applies to the default <out>/plans only"),
    (["--plan-cap", "5", "--plan-folder", "none"], "--plan-cap caps plans on disk"),
    (["--plan-cap", "0"], "--plan-cap: must be a finite number > 0, got 0"),
    (["--plan-cap", "inf"], "--plan-cap: must be a finite number > 0"),
])
def test_plan_options_that_contradict_or_are_out_of_range_exit_2(tmp_path: Path, capsys, monkeypatch, extra,
                                                                  expected) -> None:
    monkeypatch.chdir(tmp_path)
    out = tmp_path / "out"
    assert main(["sweep", str(_spec_file(tmp_path)), "--out", str(out), "--quiet", *extra]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and expected in err, err
    assert not out.exists() and not (tmp_path / "elsewhere").exists()


def test_help_names_the_option_and_its_off_word(capsys) -> None:
    with pytest.raises(SystemExit):
        main(["sweep", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert "--plan-folder FOLDER|none" in text and "'none': no plans on disk" in text
    assert "--keep-plans" in text and "--plan-cap MB" in text and "least recently used" in text
