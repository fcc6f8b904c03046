"""Sweep outputs: the tidy result tables, the per-run summary, and the break-even grid.

* ``results.parquet``: one row per run x session (means over the simulated users);
* ``commands.parquet``: one row per run x command (mean uses and time per user);
* ``users.parquet``: one row per run x simulated user (``user``: position in the run's seed list,
  ``seed``, total time, hotkey uses, learning trials): every agent at a design point runs on the
  same seeds, so paired differences per user can be formed;
* ``trials.parquet``: every trial of every run (only when ``outputs.trial_tables``), with ``user``
  and ``seed`` meaning what they mean in ``users.parquet`` (join the two on ``run_id`` and ``user``);
* ``summary.csv``: one row per run: total time per user, final-session hotkey share, learning
  trials, time saved against always-menu at the same point, and the gap to the reference agent,
  each time with its standard error over the simulated users (``*_se_s``: sd / sqrt(users), of the
  per-user totals, and of the paired per-user differences for the two comparisons); then what
  computing the run cost (:data:`COST_COLUMNS`, from its ``meta.json``): wall seconds in the
  worker ``compute_s``, of which ``plan_s`` making or reading the plan, ``plan_wait_s`` waiting for
  another worker making it, ``simulation_s`` the rest; CPU seconds ``compute_cpu_s``,
  ``plan_cpu_s``, ``simulation_cpu_s``; and ``plans_made`` / ``plans_loaded`` (read from the plan
  store). These vary from one computation to the next (machine load, which worker planned a
  world first); every other column is the same for any backend, worker count or resume;
* ``index.md``: the time saved per agent and condition, and the computing time per agent and in
  all (runs, plans made and read, planning, waiting and simulation seconds);
* ``failures.csv``: the failed runs and their errors;
* ``plots/``: see :mod:`shortcut_gym.lab.sweep.plots`.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from shortcut_gym.envs.errors import ConfigError, DataError
from shortcut_gym.lab.sweep.plan import world_from_settings
from shortcut_gym.lab.sweep.spec import SweepSpec
from shortcut_gym.lab.sweep.store import SweepStore, atomic_write_text, unique_suffix

#: Seconds columns of summary.csv (wall and CPU): they differ between two computations of one sweep.
TIMING_COLUMNS = ("compute_s", "plan_s", "plan_wait_s", "simulation_s", "compute_cpu_s", "plan_cpu_s",
                  "simulation_cpu_s")
#: Every column of summary.csv about how a run was computed: the timings and the plan counts (which
#: worker made a plan and which read it depends on the order runs were taken up).
COST_COLUMNS = (*TIMING_COLUMNS, "plans_made", "plans_loaded")

MENU_BASELINE = "always_menu"
PLANNER = "bounded_optimal"


def _atomic_parquet(df: pd.DataFrame, path: Path) -> None:
    tmp = path.with_name(f".tmp-{path.name}.{unique_suffix()}")
    try:
        df.to_parquet(tmp, index=False)
        tmp.replace(path)
    finally:
        tmp.unlink(missing_ok=True)


def agent_roles(spec: SweepSpec, labels: list[str]) -> dict[str, str | None]:
    """Labels of the menu baseline, the reference (planner) and the break-even learner, if any."""
    by_name: dict[str, list[str]] = {}
    for entry, label in zip(spec.agents, labels, strict=True):
        by_name.setdefault(entry.name, []).append(label)
    menu = by_name.get(MENU_BASELINE, [None])[0]
    reference = spec.outputs.reference_agent or by_name.get(PLANNER, [None])[0]
    be = spec.outputs.break_even
    learner = be.learner if be and be.learner else (by_name.get("learn_first_k", [None])[0] or reference)
    return {"menu": menu, "reference": reference, "learner": learner}


def _standard_errors(out: pd.DataFrame, users: pd.DataFrame, roles: dict[str, str | None]) -> pd.DataFrame:
    """Add the ``*_se_s`` columns from the per-user totals (NaN when a run has no users table)."""
    def se(values: pd.Series) -> float:
        return float(values.std(ddof=1) / np.sqrt(len(values))) if len(values) > 1 else float("nan")

    if users.empty:
        for col in ("total_time_se_s", "time_saved_vs_menu_se_s", "gap_to_reference_se_s"):
            out[col] = np.nan
        return out
    per_run = users.groupby("run_index")["total_time_s"].apply(se)
    out["total_time_se_s"] = out["run_index"].map(per_run)
    for role, col in (("menu", "time_saved_vs_menu_se_s"), ("reference", "gap_to_reference_se_s")):
        label = roles[role]
        if not label:
            out[col] = np.nan
            continue
        ref = users.loc[users["agent"] == label, ["point_index", "seed", "total_time_s"]]
        paired = users.merge(ref, on=["point_index", "seed"], suffixes=("", "_ref"))
        diff = paired["total_time_s"] - paired["total_time_s_ref"]
        out[col] = out["run_index"].map(diff.groupby(paired["run_index"]).apply(se))
    return out


def cost_columns(metas: dict[str, dict[str, Any]], run_ids: pd.Series) -> pd.DataFrame:
    """The :data:`COST_COLUMNS` of the runs ``run_ids`` from their ``meta.json`` records (``metas``:
    run id -> record; a figure a record lacks, as one written by older code may, is NaN)."""
    def figure(meta: dict[str, Any], name: str) -> float:
        value = meta.get(name)
        return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else math.nan

    rows = []
    for run_id in run_ids:
        meta = metas.get(run_id, {})
        compute, plan, wait = figure(meta, "compute_s"), figure(meta, "plan_s"), figure(meta, "plan_wait_s")
        cpu, plan_cpu = figure(meta, "compute_cpu_s"), figure(meta, "plan_cpu_s")
        rows.append({"compute_s": compute, "plan_s": plan, "plan_wait_s": wait,
                     "simulation_s": compute - plan - wait, "compute_cpu_s": cpu, "plan_cpu_s": plan_cpu,
                     "simulation_cpu_s": cpu - plan_cpu, "plans_made": figure(meta, "plans_made"),
                     "plans_loaded": figure(meta, "plans_loaded")})
    out = pd.DataFrame(rows, columns=list(COST_COLUMNS))
    for col in ("plans_made", "plans_loaded"):
        if out[col].notna().all():
            out[col] = out[col].astype(int)
    return out


def without_cost_columns(summary: pd.DataFrame) -> pd.DataFrame:
    """``summary`` (summary.csv) without its :data:`COST_COLUMNS`: what is equal between two
    computations of one sweep (any backend, worker count, resume). A table missing one of them is
    refused, naming it (it is no summary of this code)."""
    missing = [c for c in COST_COLUMNS if c not in summary.columns]
    if missing:
        raise DataError(f"the summary has no column(s) {missing}")
    return summary.drop(columns=list(COST_COLUMNS))


def compute_time_table(summary: pd.DataFrame) -> pd.DataFrame:
    """Computing time per agent and over all runs ("all runs"), from summary.csv's cost columns."""
    sums = {"runs": ("run_id", "count"), "plans made": ("plans_made", "sum"), "plans read": ("plans_loaded", "sum"),
            "planning wall s": ("plan_s", "sum"), "planning CPU s": ("plan_cpu_s", "sum"),
            "waiting s": ("plan_wait_s", "sum"), "simulation wall s": ("simulation_s", "sum"),
            "simulation CPU s": ("simulation_cpu_s", "sum")}
    per_agent = summary.groupby("agent", sort=False).agg(**sums)
    total = summary.assign(agent="all runs").groupby("agent").agg(**sums)
    table = pd.concat([per_agent, total])
    table.index.name = "agent"
    return table


def summary_table(spec: SweepSpec, runs: list[dict[str, Any]], blocks: pd.DataFrame,
                  users: pd.DataFrame | None = None,
                  metas: dict[str, dict[str, Any]] | None = None) -> pd.DataFrame:
    """One row per finished run (see the module docstring); ``users`` is the per-user table,
    ``metas`` the runs' ``meta.json`` records by run id (None: no cost columns)."""
    if blocks.empty:
        return pd.DataFrame()
    paths = list(spec.vary.parameters)
    b = blocks.assign(learn_trials=blocks["learn_share"] * blocks["trials"])
    g = b.groupby(["run_index", "run_id", "point_index", "agent"], sort=True)
    out = g.agg(total_time_s=("time_s", "sum"), learn_trials=("learn_trials", "sum"), users=("users", "first"))
    last = b.loc[b.groupby("run_index")["session"].idxmax()].set_index("run_index")
    out = out.reset_index()
    out["final_hotkey_share"] = last.loc[out["run_index"], "hotkey_share"].to_numpy()
    point_of = {r["index"]: r["point"] for r in runs}
    for j, p in enumerate(paths):
        out.insert(4 + j, p, [point_of[i][p] for i in out["run_index"]])
    roles = agent_roles(spec, [r["label"] for r in runs[: len(spec.agents)]])
    for role, col in (("menu", "time_saved_vs_menu_s"), ("reference", "gap_to_reference_s")):
        label = roles[role]
        ref = out[out["agent"] == label].set_index("point_index")["total_time_s"] if label else pd.Series(dtype=float)
        vals = out["point_index"].map(ref)
        out[col] = (vals - out["total_time_s"]) if role == "menu" else (out["total_time_s"] - vals)
    out = _standard_errors(out, pd.DataFrame() if users is None else users, roles)
    if metas is not None:
        out = pd.concat([out, cost_columns(metas, out["run_id"])], axis=1)
    return out


def break_even_grid(spec: SweepSpec, runs: list[dict[str, Any]], commands: pd.DataFrame,
                    refine: int = 1) -> dict[str, Any] | None:
    """Simulated saving of the learner over always-menu on one command, and the analytic verdict.

    Returns x and y values of the swept grid, the simulated saving (s per user; mean over any other
    varied parameters), and the analytic ``learning_pays`` of ``agents.planner.break_even_table`` on
    the swept grid and on a grid refined ``refine`` times between swept values (the boundary is
    drawn from that one), other varied parameters held at their first value. None if the spec has
    no two grid parameters or no menu baseline and learner.
    """
    from shortcut_gym.agents.planner import break_even_table
    from shortcut_gym.lab.sweep.design import grid_values
    from shortcut_gym.lab.sweep.spec import apply_overrides

    params = spec.vary.parameters
    be = spec.outputs.break_even
    paths = list(params)
    if be is None and len(paths) < 2:
        return None
    xp, yp = (be.x, be.y) if be else (paths[0], paths[1])
    if spec.vary.design != "grid":
        return None
    roles = agent_roles(spec, [r["label"] for r in runs[: len(spec.agents)]])
    if roles["menu"] is None or roles["learner"] is None or commands.empty:
        return None
    xs, ys = grid_values(params[xp]), grid_values(params[yp])
    if not all(isinstance(v, (int, float)) for v in xs + ys):
        return None  # a map needs numeric axes (a spec's own break_even is checked on load)
    world0 = world_from_settings(runs[0]["settings"])
    cmd = be.command if be else 0
    c = world0.commands.index(cmd) if isinstance(cmd, str) else int(cmd)
    if not 0 <= c < world0.commands.n_commands:
        raise ConfigError(f"outputs.break_even.command: index {c} is outside 0..{world0.commands.n_commands - 1}")
    point_of = {r["point_index"]: r["point"] for r in runs}
    sel = commands[commands["command"] == c].copy()
    sel["x"] = sel["point_index"].map(lambda i: point_of[i][xp])
    sel["y"] = sel["point_index"].map(lambda i: point_of[i][yp])
    t = sel.pivot_table(index=["x", "y"], columns="agent", values="time_s", aggfunc="mean")
    saving = np.full((len(ys), len(xs)), np.nan)
    for i, y in enumerate(ys):
        for j, x in enumerate(xs):
            if (x, y) in t.index and roles["learner"] in t.columns and roles["menu"] in t.columns:
                saving[i, j] = t.loc[(x, y), roles["menu"]] - t.loc[(x, y), roles["learner"]]
    base = runs[0]["settings"]
    others = {p: grid_values(params[p])[0] for p in paths if p not in (xp, yp)}

    def verdict(x: Any, y: Any) -> tuple[bool, float]:
        row = break_even_table(world_from_settings(apply_overrides(base, {**others, xp: x, yp: y}))).iloc[c]
        return bool(row["learning_pays"]), float(row["break_even_uses"])

    swept = np.array([[verdict(x, y)[0] for x in xs] for y in ys])
    fx, fy = _refined(xs, params[xp].scale, refine), _refined(ys, params[yp].scale, refine)
    fine = swept if refine == 1 else np.array([[verdict(x, y)[0] for x in fx] for y in fy])
    return {"x_path": xp, "y_path": yp, "x": xs, "y": ys, "command": c, "command_name": world0.commands.names[c],
            "learner": roles["learner"], "menu": roles["menu"], "simulated_saving_s": saving,
            "analytic_pays": swept, "fine_x": fx, "fine_y": fy, "fine_pays": fine}


def _refined(values: list[Any], scale: str, refine: int) -> list[Any]:
    if refine <= 1 or len(values) < 2 or not all(isinstance(v, (int, float)) for v in values):
        return list(values)
    out: list[float] = []
    for a, b in zip(values[:-1], values[1:], strict=True):
        if scale == "log" and a > 0 and b > 0:
            out += [float(v) for v in np.geomspace(a, b, refine + 1)[:-1]]
        else:
            out += [float(v) for v in np.linspace(a, b, refine + 1)[:-1]]
    return out + [float(values[-1])]


def write_outputs(spec: SweepSpec, runs: list[dict[str, Any]], store: SweepStore) -> dict[str, Path]:
    """Write the tables and plots of all finished runs; returns name -> path."""
    folder = store.folder
    written: dict[str, Path] = {}
    blocks = store.read_table(runs, "blocks")
    commands = store.read_table(runs, "commands")
    users = store.read_table(runs, "users")
    if not blocks.empty:
        _atomic_parquet(blocks, folder / "results.parquet")
        written["results"] = folder / "results.parquet"
        _atomic_parquet(commands, folder / "commands.parquet")
        written["commands"] = folder / "commands.parquet"
    if not users.empty:
        _atomic_parquet(users, folder / "users.parquet")
        written["users"] = folder / "users.parquet"
    if spec.outputs.trial_tables:
        trials = store.read_table(runs, "trials")
        if not trials.empty:
            _atomic_parquet(trials, folder / "trials.parquet")
            written["trials"] = folder / "trials.parquet"
    summary = summary_table(spec, runs, blocks, users, store.read_metas(runs))
    if not summary.empty:
        atomic_write_text(folder / "summary.csv", summary.to_csv(index=False))
        written["summary"] = folder / "summary.csv"
    failures = store.failures()
    fail_path = folder / "failures.csv"
    if failures:
        atomic_write_text(fail_path, pd.DataFrame(failures)[["run_id", "error"]].to_csv(index=False))
        written["failures"] = fail_path
    elif fail_path.exists():
        fail_path.unlink()
    if spec.outputs.plots and not blocks.empty:
        from shortcut_gym.lab.sweep import plots as sweep_plots

        n_points = len({r["point_index"] for r in runs})
        grid = break_even_grid(spec, runs, commands, refine=2 if n_points <= 36 else 1)
        roles = agent_roles(spec, [r["label"] for r in runs[: len(spec.agents)]])
        written.update(sweep_plots.write_plots(spec, blocks, summary, grid, folder / "plots", roles))
    else:
        grid = None
    atomic_write_text(folder / "index.md", sweep_index(spec, folder, runs, summary, grid, written, len(failures)))
    written["index"] = folder / "index.md"
    return written


#: What each written output holds, for the sweep's index.md.
_OUTPUT_NOTES = {
    "results": "per run x block: time, hotkey share, learn trials (tidy)",
    "commands": "per run x command: time and hotkey use",
    "users": "per run x simulated user (user: position in the seed list; seed): total time, hotkey uses, "
             "learning trials (for paired differences)",
    "trials": "every simulated trial (user and seed as in users; join on run_id and user)",
    "summary": "per run: total time, time saved over always-menu, gap to the reference agent, planning and "
               "simulation seconds",
    "failures": "runs that raised, with their error",
    "adoption_plot": "hotkey adoption curves per condition",
    "break_even_plot": "break-even map with the break-even rule's boundary",
    "time_saved_plot": "time saved per agent versus the reference",
}


def sweep_index(spec: SweepSpec, folder: Path, runs: list[dict[str, Any]], summary: pd.DataFrame,
                grid: dict[str, Any] | None, written: dict[str, Path], n_failed: int) -> str:
    """The sweep folder's ``index.md``: what ran, time saved per agent and condition, the break-even
    agreement, the plots, then every file."""
    from shortcut_gym.lab.report import index_markdown, markdown_table

    intro = f"{spec.description or ''}\n\n{len(runs)} runs planned; {len(summary)} finished, {n_failed} failed."
    sections = []
    saved = summary.get("time_saved_vs_menu_s")
    if saved is not None and saved.notna().any():
        table = summary.pivot_table(index=list(spec.vary.parameters), columns="agent", values="time_saved_vs_menu_s")
        sections.append(("Time saved over always-menu (s per simulated user)",
                         markdown_table(table, index=True, digits=1) if len(table) <= 60
                         else f"{len(table)} conditions: see `summary.csv`."))
    if "plan_s" in summary.columns:
        sections.append(("Computing time (seconds in the workers, summed over the finished runs)",
                         markdown_table(compute_time_table(summary), index=True, digits=3)
                         + "\n\nPlanning: making a plan or reading it from the plan store; waiting: for another "
                         "worker making the same plan; simulation: the rest of the run. Wall and CPU seconds "
                         "of each run are in `summary.csv` and its `runs/<id>/meta.json`."))
    if grid is not None:
        sections.append(("Break-even", f"On '{grid['command_name']}', the simulated verdict of {grid['learner']} "
                         f"against {grid['menu']} agrees with the break-even rule on "
                         f"{fraction_agreeing(grid):.0%} of the swept cells."))
    plots = [k for k in ("adoption_plot", "break_even_plot", "time_saved_plot") if k in written]
    if plots:
        sections.append(("Plots", "\n".join(f"![{_OUTPUT_NOTES[k]}]({written[k].relative_to(folder).as_posix()})"
                                            for k in plots)))
    entries = [(p, _OUTPUT_NOTES.get(k, k)) for k, p in written.items()]
    entries += [(folder / "manifest.json", "the run plan and each run's state (used to resume)"),
                (folder / "runs", "one folder per finished run")]
    return index_markdown(folder, entries, f"Sweep {spec.name}", sections, intro)


def fraction_agreeing(grid: dict[str, Any], margin_s: float = 0.0) -> float:
    """Share of swept cells where the simulated sign of the saving matches the analytic verdict
    (cells with |saving| <= margin_s are left out)."""
    sim, ana = grid["simulated_saving_s"], grid["analytic_pays"]
    keep = np.isfinite(sim) & (np.abs(sim) > margin_s)
    if not keep.any():
        return math.nan
    return float(((sim > 0) == ana)[keep].mean())
