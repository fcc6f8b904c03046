"""One sweep run, computed anywhere (a local process or a Ray worker): plain data in, tables out.

``compute_run`` never raises: a failing run comes back with ``status='failed'`` and its error,
so one bad run does not stop the others. Its tables hold only simulated numbers (no timings or
host names), so every backend and worker count gives the same tables.
"""

from __future__ import annotations

import os
import time
import traceback
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.agents.planner import cache as plan_cache
from shortcut_gym.agents.planner.plan_store import using_plan_store
from shortcut_gym.envs import kernel as k
from shortcut_gym.lab.sweep.batch import BlockSums, prepare_agent, simulate_users, trial_table
from shortcut_gym.lab.sweep.plan import run_world

#: Per-session metric columns of the result table (means over simulated users).
BLOCK_METRICS = ("time_s", "time_sd_s", "hotkey_share", "hotkey_attempt_share", "learn_share", "failure_share",
                 "menu_share")

#: Environment variable naming a file to which every computed run appends a line (tests use it).
COMPUTE_LOG_ENV = "SHORTCUT_GYM_SWEEP_COMPUTE_LOG"


def _repeat(value: Any, n: int) -> np.ndarray:
    """``value`` repeated n times as the column pandas would broadcast it to (strings as objects,
    which the frame stores as its string dtype); building the arrays here skips pandas' slower
    scalar broadcast, the largest cost of small tables."""
    return np.full(n, value, dtype=object if isinstance(value, str) or value is None else None)


def _run_columns(run: dict[str, Any], n: int) -> dict[str, Any]:
    """The run's identifying columns (run id, index, point index, agent label) for n rows."""
    return {"run_id": _repeat(run["run_id"], n), "run_index": _repeat(run["index"], n),
            "point_index": _repeat(run["point_index"], n), "agent": _repeat(run["label"], n)}


def block_table(run: dict[str, Any], sums: BlockSums) -> pd.DataFrame:
    """Per-session rows of one run: means over users of time and of action / outcome shares."""
    trials = sums.trials.astype(float)
    out = sums.outcomes.astype(float)
    act = sums.actions.astype(float)
    n_sess = trials.shape[1]
    frame = _run_columns(run, n_sess)
    for path, value in run["point"].items():
        frame[path] = _repeat(value, n_sess)
    frame.update(
        session=np.arange(1, n_sess + 1),
        users=np.full(n_sess, trials.shape[0]),
        trials=trials.mean(axis=0),
        time_s=sums.time_s.mean(axis=0),
        time_sd_s=sums.time_s.std(axis=0, ddof=1) if trials.shape[0] > 1 else np.zeros(n_sess),
        hotkey_share=(out[:, :, k.OUT_HOTKEY] / trials).mean(axis=0),
        hotkey_attempt_share=(act[:, :, k.HOTKEY] / trials).mean(axis=0),
        learn_share=(act[:, :, k.LEARN] / trials).mean(axis=0),
        failure_share=((out[:, :, k.OUT_FORGOTTEN] + out[:, :, k.OUT_WRONG]) / trials).mean(axis=0),
        menu_share=(act[:, :, k.MENU] / trials).mean(axis=0),
    )
    return pd.DataFrame(frame)


def command_table(run: dict[str, Any], sums: BlockSums, names: tuple[str, ...]) -> pd.DataFrame:
    """Per-command rows of one run: mean uses and mean total time (s) per user."""
    n_cmd = sums.command_uses.shape[1]
    return pd.DataFrame({
        **_run_columns(run, n_cmd), "command": np.arange(n_cmd), "command_name": np.array(names, dtype=object),
        "uses": sums.command_uses.mean(axis=0), "time_s": sums.command_time_s.mean(axis=0),
    })


def user_table(run: dict[str, Any], sums: BlockSums) -> pd.DataFrame:
    """Per-user rows of one run: seed, total time (s), successful hotkey uses and learning trials, so
    that paired differences between agents on the same seeds (and their standard errors) can be computed."""
    n_users = sums.time_s.shape[0]
    return pd.DataFrame({
        **_run_columns(run, n_users), "user": np.arange(n_users), "seed": np.asarray(sums.seeds),
        "total_time_s": sums.time_s.sum(axis=1),
        "hotkey_uses": sums.outcomes[:, :, k.OUT_HOTKEY].sum(axis=1),
        "learn_trials": sums.actions[:, :, k.LEARN].sum(axis=1),
    })


def compute_run(run: dict[str, Any]) -> dict[str, Any]:
    """Simulate one run; returns status, tables (or the error), the compute time ``compute_s`` and,
    within it, the time spent on the plan ``plan_s`` (a planner's plan for the run's world: made, or
    read from the plan store, once per world in the worker process; 0 when an earlier run of the
    same world in this process had it), the seconds within it spent waiting for another worker
    that held the plan's store lock while making it (``plan_wait_s``, not in ``plan_s``; so
    simulation is ``compute_s - plan_s - plan_wait_s``), the compute and plan times as this
    process's CPU seconds (``compute_cpu_s``, ``plan_cpu_s``: not inflated by other processes
    sharing the cores), and the plans this run made and read (``plans_made``, ``plans_loaded``).

    ``run["plan_store"]`` (optional): the folder of the on-disk plan store
    (:mod:`shortcut_gym.agents.planner.plan_store`) shared by every worker of the sweep, so each
    distinct world is planned once in all; ``run["plan_store_bytes"]`` (optional): the store's
    byte cap (least recently used entries removed after each write)."""
    start, cpu_start = time.perf_counter(), time.process_time()
    plan_s = plan_cpu_s = 0.0
    made, loaded, waited = plan_cache.plans_made(), plan_cache.plans_loaded(), plan_cache.waiting_seconds()
    try:
        world = run_world(run["settings"])
        cpu_before = time.process_time()
        with using_plan_store(run.get("plan_store"), run.get("plan_store_bytes")):
            plan_s = prepare_agent(run["agent"], world)
        plan_cpu_s = time.process_time() - cpu_before if plan_s > 0.0 else 0.0
        record = "trials" if run.get("trial_tables") else "blocks"
        sums = simulate_users(world, run["agent"], run["seeds"], record=record)
        result: dict[str, Any] = {
            "run_id": run["run_id"], "status": "done",
            "blocks": block_table(run, sums),
            "commands": command_table(run, sums, world.commands.names),
            "users": user_table(run, sums),
        }
        if record == "trials":
            trials = trial_table(world, sums, run["label"])
            trials.insert(0, "run_id", run["run_id"])
            result["trials"] = trials
    except Exception as err:  # noqa: BLE001 - a failing run is recorded, never raised
        result = {"run_id": run["run_id"], "status": "failed", "error": f"{type(err).__name__}: {err}",
                  "traceback": traceback.format_exc()}
    result["compute_s"] = time.perf_counter() - start
    result["plan_s"] = plan_s
    result["plan_wait_s"] = plan_cache.waiting_seconds() - waited
    result["compute_cpu_s"] = time.process_time() - cpu_start
    result["plan_cpu_s"] = plan_cpu_s
    result["plans_made"] = plan_cache.plans_made() - made
    result["plans_loaded"] = plan_cache.plans_loaded() - loaded
    result["pid"] = os.getpid()
    log = os.environ.get(COMPUTE_LOG_ENV)
    if log and not run.get("warm_up"):
        with open(log, "a") as fh:
            fh.write(f"{run['run_id']}\n")
    return result


def compute_runs(runs: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Several runs in one task, in order (each recorded on its own, failures included)."""
    return [compute_run(run) for run in runs]
