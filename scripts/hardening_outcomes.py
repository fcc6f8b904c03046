"""Bad inputs by family, each classified as: clear error / accepted and correct / other.

A clear error names what is wrong (the expected fragment is in the message) and, through the
CLI, is one line with exit code 2. "Accepted and correct" is for inputs whose right answer is
acceptance (``1e-1`` read as 0.1, an id "NA" kept). Anything else (silent acceptance, a traceback,
a message that does not name the fault) is "other". Runs in-process against whatever
``shortcut_gym`` is importable, so the same script measures a checkout before and after a change.
"""

from __future__ import annotations

import collections
import contextlib
import io
import sys
import tempfile
from collections.abc import Callable
from decimal import Decimal
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.envs.config import load_settings, read_yaml
from shortcut_gym.envs.costs import CostSettings
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.envs.memory import MemorySettings
from shortcut_gym.envs.task import ScenarioSettings
from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.cli import main
from shortcut_gym.lab.data.logs import read_log, validate_log

TMP = Path(tempfile.mkdtemp())
INF, NAN = float("inf"), float("nan")
SCEN = {"name": "t", "menus": [{"title": "Log", "items": [{"name": "Add", "hotkey": "Ctrl+A"},
                                                           {"name": "Tag", "hotkey": "Ctrl+T"}]}]}


def raises(fn: Callable[[], Any], fragment: str) -> str:
    try:
        fn()
    except Exception as err:  # noqa: BLE001 - classified
        return "clear error" if fragment.lower() in str(err).lower() else "other"
    return "other"


def accepts(fn: Callable[[], Any], check: Callable[[Any], bool]) -> str:
    try:
        return "accepted and correct" if check(fn()) else "other"
    except Exception:  # noqa: BLE001
        return "other"


def cli(argv: list[str], fragment: str) -> str:
    err = io.StringIO()
    try:
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            code = main(argv)
    except SystemExit as exc:
        code = exc.code
    except Exception:  # noqa: BLE001 - a traceback
        return "other"
    text = err.getvalue().strip()
    return "clear error" if code == 2 and fragment in text and "\n" not in text else "other"


def yaml_file(text: str, name: str = "c.yaml", raw: bytes | None = None) -> Path:
    p = TMP / name
    p.write_bytes(raw if raw is not None else text.encode())
    return p


def scen(**change: Any) -> dict[str, Any]:
    import copy
    s = copy.deepcopy(SCEN)
    s.update(change)
    return s


def hot(a: str, b: str) -> dict[str, Any]:
    return scen(menus=[{"title": "Log", "items": [{"name": "Add", "hotkey": a}, {"name": "Tag", "hotkey": b}]}])


WORLD = make_world()


def log_of() -> pd.DataFrame:
    from shortcut_gym.lab.checks.predictive import simulate_log
    from shortcut_gym.lab.fitting import ModelSpec
    return simulate_log(WORLD, ModelSpec("random"), 2, np.random.default_rng(0), prefix="P")


LOG = log_of()


def step(action: Any) -> Any:
    env = CommandSelectionEnv(schedule={"sessions": 1, "trials_per_session": 3})
    env.reset(seed=0)
    return env.step(action)


def spec(**change: Any) -> dict[str, Any]:
    s = {"name": "v", "base": {"schedule": {"sessions": 1, "trials_per_session": 4}},
         "vary": {"parameters": {"costs.klm.keystroke_s": {"values": [0.1, 0.2]}}},
         "agents": [{"name": "always_menu"}], "seeds": {"count": 1}}
    s.update(change)
    return s


def plan(s: dict[str, Any]) -> Any:
    from shortcut_gym.lab.sweep.plan import plan_runs
    from shortcut_gym.lab.sweep.spec import parse_spec
    return plan_runs(parse_spec(s))


def parquet_log(column: str, convert: Callable[[pd.Series], pd.Series]) -> Path:
    p = TMP / f"{column}.parquet"
    LOG.assign(**{column: convert(LOG[column])}).to_parquet(p, index=False)
    return p


def with_id(pid: str) -> Path:
    p = TMP / "ids.csv"
    first = LOG["participant"].iloc[0]
    LOG.assign(participant=np.where(LOG["participant"] == first, pid, LOG["participant"])).to_csv(p, index=False)
    return p


FILE = TMP / "a_file"
FILE.write_text("x")

def short_run(**world: Any) -> bool:
    """True if a 12-trial learn/hotkey/menu run in this world has finite times and rewards."""
    from shortcut_gym.envs.world import make_world as build
    env = CommandSelectionEnv(world=build(**world, schedule={"sessions": 3, "trials_per_session": 4}))
    env.reset(seed=0)
    for a in [2, 1, 0, 1, 1, 0, 1, 2, 1, 1, 0, 1]:
        _, reward, *_, info = env.step(a)
        if not (np.isfinite(reward) and all(np.isfinite(v) for v in info["time_s"].values())):
            return False
    return True


def absurd(kind: str, path: str, value: Any) -> Callable[[], str]:
    """A setting far outside any sane range (a unit mistake or an extreme): refused naming it."""
    data: Any = value
    for part in reversed(path.split(".")):
        data = {part: data}
    if kind == "schedule":
        return lambda: raises(lambda: short_run(scenario=scen(schedule=data)), path.split(".")[-1])
    return lambda: raises(lambda: short_run(**{kind: data}), path.split(".")[-1])


CASES: dict[str, list[Callable[[], str]]] = {
    "absurd magnitudes": [
        absurd("costs", "klm.keystroke_s", 200.0), absurd("costs", "klm.keystroke_s", 1e300),
        absurd("costs", "klm.point_s", 1e308), absurd("costs", "klm.mental_s", 1350.0),
        absurd("costs", "fitts.intercept_s", 1e300), absurd("costs", "fitts.slope_s_per_bit", 223.0),
        absurd("costs", "menu.search_slope_s_per_item", 1e300), absurd("costs", "learn.encoding_s", 1e300),
        absurd("costs", "errors.undo_keystrokes", 10**18), absurd("costs", "menu.item_height_px", 1e-300),
        absurd("memory", "threshold", -1e6), absurd("memory", "threshold", 1e6),
        absurd("memory", "noise_s", 1e-300), absurd("memory", "noise_s", 1e300),
        absurd("memory", "latency_factor_s", 1e300), absurd("memory", "spacing_scale", 1e300),
        absurd("memory", "exponential_rate_per_s", 1e300), absurd("memory", "power_time_unit_s", 1e-300),
        absurd("memory", "weights.learn", 1e300), absurd("schedule", "trial_interval_s", 1e300),
        absurd("schedule", "trial_interval_s", 1e-300), absurd("schedule", "gap_h", 1e300),
        lambda: accepts(lambda: short_run(memory={"decay": 1e-300}), bool),
        lambda: accepts(lambda: short_run(scenario=scen(schedule={"gap_h": 1e-300})), bool),
    ],
    "non-finite and absurd values": [
        lambda: raises(lambda: load_settings(CostSettings, {"fitts": {"intercept_s": NAN}}), "intercept_s"),
        lambda: raises(lambda: load_settings(CostSettings, {"klm": {"point_s": INF}}), "point_s"),
        lambda: raises(lambda: load_settings(CostSettings, {"klm": {"keystroke_s": True}}), "keystroke_s"),
        lambda: raises(lambda: load_settings(CostSettings, {"learn": {"encoding_s": INF}}), "encoding_s"),
        lambda: raises(lambda: load_settings(MemorySettings, {"latency_factor_s": INF}), "latency_factor_s"),
        lambda: raises(lambda: load_settings(MemorySettings, {"threshold": NAN}), "threshold"),
        lambda: raises(lambda: load_settings(MemorySettings, {"decay": True}), "decay"),
        lambda: raises(lambda: load_settings(ScenarioSettings, scen(schedule={"trial_interval_s": INF})),
                       "trial_interval_s"),
        lambda: raises(lambda: load_settings(ScenarioSettings, scen(schedule={"sessions": 10**9})), "sessions"),
        lambda: raises(lambda: plan(spec(vary={"parameters": {
            "costs.klm.keystroke_s": {"low": 0.1, "high": 1.0, "steps": 1000},
            "costs.learn.encoding_s": {"low": 1.0, "high": 2.0, "steps": 1000}}})), "limit"),
    ],
    "duplicate YAML keys": [
        lambda: raises(lambda: read_yaml(yaml_file("klm: {point_s: 1}\nklm: {point_s: 2}\n")), "twice"),
        lambda: raises(lambda: read_yaml(yaml_file("name: a\nname: b\n")), "twice"),
        lambda: raises(lambda: read_yaml(yaml_file("a:\n  b: 1\n  b: 2\n")), "twice"),
    ],
    "YAML numbers": [
        lambda: accepts(lambda: read_yaml(yaml_file("v: 1e-1\n"))["v"], lambda v: v == 0.1),
        lambda: accepts(lambda: read_yaml(yaml_file("v: 2E3\n"))["v"], lambda v: v == 2000.0),
        lambda: raises(lambda: read_yaml(yaml_file("", raw=b"name: caf\xe9\n")), "c.yaml"),
    ],
    "scenario hotkeys and names": [
        lambda: raises(lambda: load_settings(ScenarioSettings, hot("Ctrl+Shift+K", "Shift+Ctrl+K")), "both"),
        lambda: raises(lambda: load_settings(ScenarioSettings, hot("Ctrl+k", "Ctrl+K")), "both"),
        lambda: raises(lambda: load_settings(ScenarioSettings, hot("Ctrl+Ctrl+K", "Ctrl+T")), "twice"),
        lambda: raises(lambda: load_settings(ScenarioSettings, hot("Hyper+K", "Ctrl+T")), "Hyper"),
        lambda: raises(lambda: load_settings(ScenarioSettings, scen(menus=[{"title": "L", "items": [
            {"name": "  ", "hotkey": "Ctrl+A"}]}])), "name"),
    ],
    "trial logs": [
        lambda: raises(lambda: read_log(parquet_log("duration_s", lambda s: pd.to_timedelta(s, unit="s")),
                                        WORLD.commands), "duration_s"),
        lambda: raises(lambda: read_log(parquet_log("onset_s", lambda s: pd.to_datetime(s, unit="s")),
                                        WORLD.commands), "onset_s"),
        lambda: accepts(lambda: read_log(with_id("NA"), WORLD.commands), lambda t: "NA" in set(t["participant"])),
        lambda: accepts(lambda: read_log(with_id("None"), WORLD.commands), lambda t: "None" in set(t["participant"])),
        lambda: raises(lambda: validate_log(LOG.assign(session=LOG["session"] - 5), WORLD.commands), "session"),
        lambda: raises(lambda: validate_log(LOG.assign(trial=LOG["trial"] - 10**6), WORLD.commands), "trial"),
    ],
    "late validation": [
        lambda: raises(lambda: plan(spec(agents=[{"name": "learn_first_k", "params": {"k": 1.5}}])), "k"),
        lambda: raises(lambda: plan(spec(seeds={"first": 2**63 - 1, "count": 2})), "seed"),
        lambda: raises(lambda: plan(spec(vary={"parameters": {"costs.klm.keystroke_s": {"values": [0.1]},
                                                              "costs.learn.encoding_s": {"values": [1.0]}}},
                                         outputs={"break_even": {"x": "costs.klm.keystroke_s",
                                                                 "y": "costs.learn.encoding_s", "command": 99}})),
                       "command"),
    ],
    "tracebacks for a user's mistake": [
        lambda: cli(["simulate", "--seed", "-1"], "--seed"),
        lambda: cli(["simulate", "--users", "1", "--out", str(FILE)], "a_file"),
        lambda: cli(["simulate", "--users", "1", "--out", str(FILE / "sub")], "a_file"),
        lambda: cli(["simulate", "--agent", str(yaml_file("{{{ not yaml", "agent.yaml"))], "agent"),
        lambda: cli(["sweep", "demo", "--out", str(FILE)], "a_file"),
        lambda: cli(["compare", str(FILE), "--out", str(FILE)], "a_file"),
        lambda: raises(lambda: step(INF), "action"),
        lambda: raises(lambda: CommandSelectionEnv(render_mode="ansi").render(), "reset"),
    ],
    "command-line options": [
        lambda: cli(["simulate", "--users", "0"], "--users"),
        lambda: cli(["simulate", "--users", "1.5"], "--users"),
        lambda: cli(["simulate", "--users", str(10**12)], "--users"),
        lambda: cli(["simulate", "--seed", str(2**70)], "--seed"),
        lambda: cli(["simulate", "--agent", "learn_first_k:k=-1"], "k=-1"),
        lambda: cli(["simulate", "--agent", "learn_first_k:k"], "key=value"),
        lambda: cli(["simulate", "--agent", ":"], "name"),
        lambda: cli(["simulate", "--costs", str(yaml_file("klm: {keystroke_s: 200}\n", "ms.yaml"))], "keystroke_s"),
        lambda: cli(["simulate", "--costs", str(yaml_file("klm: {keystrok_s: 0.2}\n", "typo.yaml"))], "keystrok_s"),
        lambda: cli(["simulate", "--costs", str(yaml_file("- 1\n", "list.yaml"))], "mapping"),
        lambda: cli(["simulate", "--memory", str(TMP)], str(TMP)),
        lambda: cli(["simulate", "--agent-file", str(TMP / "no_such.yaml")], "no_such.yaml"),
        lambda: cli(["simulate", "--log", str(TMP / "x.txt")], ".txt"),
        lambda: cli(["fit", str(yaml_file("", "empty.csv")), "--model", "static_softmax", "--out", str(TMP / "o1")],
                    "empty"),
        lambda: cli(["fit", str(yaml_file("a,b\n1,2\n", "junk.csv")), "--model", "static_softmax", "--out",
                     str(TMP / "o2")], "participant"),
        lambda: cli(["fit", str(yaml_file("", "bad.parquet", raw=b"PAR1junk")), "--model", "static_softmax",
                     "--out", str(TMP / "o3")], "Parquet"),
        lambda: cli(["fit", str(TMP / "junk.csv"), "--model", "static_softmax", "--starts", "0", "--out",
                     str(TMP / "o4")], "--starts"),
        lambda: cli(["sweep", "demo", "--workers", "0"], "--workers"),
        lambda: cli(["audit", str(TMP)], "manifest"),
        lambda: cli(["allot", "--budget", "1000"], "--budget"),
    ],
    "actions": [
        lambda: raises(lambda: step(True), "action"),
        lambda: raises(lambda: step(1.0), "action"),
        lambda: raises(lambda: step(Decimal("1")), "action"),
        lambda: accepts(lambda: step(np.int64(1)), lambda r: r[1] < 0),
        lambda: accepts(lambda: step(np.array(2)), lambda r: r[1] < 0),
    ],
}


def run() -> dict[str, collections.Counter]:
    """Counts per family."""
    return {family: collections.Counter(case() for case in cases) for family, cases in CASES.items()}


if __name__ == "__main__":
    total: collections.Counter = collections.Counter()
    for family, counts in run().items():
        total.update(counts)
        print(f"{family:<34} " + ", ".join(f"{k}: {counts.get(k, 0)}"
                                           for k in ("clear error", "accepted and correct", "other")))
    print(f"{'all':<34} " + ", ".join(f"{k}: {total.get(k, 0)}" for k in ("clear error", "accepted and correct",
                                                                           "other")))
    sys.exit(0)
