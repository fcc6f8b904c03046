"""Interface aids: validation, off = the aid-free world bit for bit, and each aid changes exactly the
operators (and memory traces) its mechanism says, trial by trial against the cost formulas."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import pytest

from shortcut_gym.envs import CommandSelectionEnv, ConfigError, make_world
from shortcut_gym.envs import kernel as k
from shortcut_gym.envs.aids import AID_NAMES, AidSettings
from shortcut_gym.envs.memory import actr_activation, recall_probability
from shortcut_gym.envs.task import session_onsets
from shortcut_gym.envs.world import World
from shortcut_gym.lab.sweep.batch import simulate_users

SCHEDULE = {"sessions": 3, "trials_per_session": 25, "gap_h": 20.0}
MEMORY = {"kind": "actr_exact"}  # the exact base level, so the reference formula is exact too
AID_OPS = ("label_search", "nudge", "menu_delay", "lockout", "warmup")


def _world(aids: dict[str, Any] | None = None, **kw: Any) -> World:
    return make_world(schedule=kw.pop("schedule", SCHEDULE), memory=kw.pop("memory", MEMORY), aids=aids, **kw)


def _run(world: World, policy: Callable[[int, int, np.random.Generator], int], seed: int = 5) -> list[dict]:
    """Every trial's info of one user; ``policy(trial, command, rng)`` picks the action."""
    env = CommandSelectionEnv(world=world)
    _, info = env.reset(seed=seed)
    rng = np.random.default_rng(seed + 1000)
    rows = []
    for t in range(world.horizon):
        a = policy(t, int(info["target"]), rng)
        _, _, _, _, info = env.step(a)
        rows.append(dict(info, time_s=dict(info["time_s"])))
    return rows


def always(action: int) -> Callable[[int, int, np.random.Generator], int]:
    return lambda t, c, rng: action


def mixed(t: int, c: int, rng: np.random.Generator) -> int:
    return int(rng.choice(3, p=[0.45, 0.4, 0.15]))


def _same_except(on: list[dict], off: list[dict], changed: set[str]) -> None:
    """Trial by trial: every operator outside ``changed`` equal bit for bit, and the duration the sum."""
    assert len(on) == len(off)
    for t, (a, b) in enumerate(zip(on, off, strict=True)):
        assert a["command"] == b["command"]
        for op in k.OPERATOR_NAMES:
            if op not in changed:
                assert a["time_s"][op] == b["time_s"][op], (t, op)
        assert a["duration_s"] == pytest.approx(sum(a["time_s"].values()), rel=1e-12, abs=1e-12)


def _menu_path(row: dict) -> bool:
    return row["outcome"] != "hotkey"


# ---- validation -------------------------------------------------------------------------------

@pytest.mark.parametrize(("aids", "fault"), [
    ({"key_labels": {"commands": ["No such command"]}}, "aids.key_labels.commands: unknown command 'No such command'"),
    ({"nudge": {"commands": []}}, "nudge.commands"),
    ({"menu_delay": {"commands": "all", "delay_s": -1}}, "menu_delay.delay_s"),
    ({"menu_lockout": {"commands": "all", "after_uses": 1.5}}, "menu_lockout.after_uses"),
    ({"warmup": {"commands": "all", "sessions": "weekly"}}, "warmup.sessions"),
    ({"warmup": {"commands": ["Attach photo", "Attach photo"]}}, "listed twice"),
    ({"reminder": {}}, "reminder: unknown key"),
    ({"nudge": {"commands": "all", "times": True}}, "times"),
    ({"warmup": {"commands": "all", "reading_s": 4.0}}, "aids.warmup: the warm-up block lasts"),
])
def test_bad_aid_settings_name_the_field(aids: dict, fault: str) -> None:
    with pytest.raises(ConfigError, match=None) as err:
        _world(aids)
    assert fault in str(err.value)


def test_bundled_aid_presets_load_and_switch_something_on() -> None:
    from shortcut_gym.envs.config import bundled_names

    names = bundled_names(AidSettings)
    assert len(names) >= 5
    for name in names:
        world = make_world(aids=name)
        assert world.aids.any_on, name


# ---- off is the aid-free world ----------------------------------------------------------------

def test_aids_off_world_runs_the_aid_free_kernel_path() -> None:
    world = _world()
    par, ipar = world.parameters()
    assert ipar[k.I_AIDS] == 0 and ipar[k.I_WARMUP] == 0
    consts = world.aid_constants()
    assert np.all(consts[:, k.C_LOCK_AFTER - k.C_LABEL_SEARCH] == np.inf)
    consts[:, k.C_LOCK_AFTER - k.C_LABEL_SEARCH] = 0.0
    assert not consts.any()


def test_null_aids_equal_aids_off_bit_for_bit_on_every_path() -> None:
    """Every aid on for every command but with zero cost and zero trace: the aid path of the kernel
    adds exactly nothing (env, batched per-trial path and fused loop of a learning model)."""
    null = {"key_labels": {"commands": "all", "trace_weight": 0.0, "search_s_per_label": 0.0},
            "nudge": {"commands": "all", "reading_s": 0.0, "trace_weight": 0.0},
            "menu_delay": {"commands": "all", "delay_s": 0.0},
            "menu_lockout": {"commands": "all", "after_uses": 10**9}}
    on, off = _world(null), _world()
    assert on.parameters()[1][k.I_AIDS] == 1
    for policy in (mixed, always(k.MENU)):
        a, b = _run(on, policy), _run(off, policy)
        assert [(r["duration_s"], r["p_recall"], r["outcome"]) for r in a] == \
            [(r["duration_s"], r["p_recall"], r["outcome"]) for r in b]
    for spec, fused in (({"name": "rescorla_wagner"}, True), ({"name": "rescorla_wagner"}, False),
                        ({"name": "random", "params": {"p_hotkey": 0.4, "p_learn": 0.2}}, True)):
        x = simulate_users(on, spec, range(6), fused=fused)
        y = simulate_users(off, spec, range(6), fused=fused)
        assert np.array_equal(x.time_s, y.time_s) and np.array_equal(x.outcomes, y.outcomes)


# ---- each aid changes exactly its operators ---------------------------------------------------

def _menu_counts(rows: list[dict]) -> list[int]:
    """The t-th menu selection number of each menu-path trial of its command (0 for recalled hotkeys)."""
    seen: dict[int, int] = {}
    out = []
    for r in rows:
        if _menu_path(r):
            seen[r["command"]] = seen.get(r["command"], 0) + 1
            out.append(seen[r["command"]])
        else:
            out.append(0)
    return out


def _check_recall_with_traces(world: World, rows: list[dict], weights: list[float],
                              extra: dict[int, list[tuple[float, float]]] | None = None) -> None:
    """p_recall of each trial equals the exact ACT-R formula over the traces laid before it:
    trial t lays ``weights[t]`` at its clock; ``extra[c]`` lists more (clock, weight) traces."""
    m = world.memory
    onset, _, gap = session_onsets(world.schedule)
    clock = onset - (1.0 - m.gap_time_scale) * gap
    traces: dict[int, list[tuple[float, float]]] = {c: list(v) for c, v in (extra or {}).items()}
    for t, r in enumerate(rows):
        c = r["command"]
        past = [(x, w) for x, w in traces.get(c, []) if x < clock[t] and w > 0]
        a = actr_activation(clock[t], [x for x, _ in past], m.decay, [w for _, w in past]) if past else -np.inf
        assert r["p_recall"] == pytest.approx(recall_probability(a, m.threshold, m.noise_s), rel=1e-9, abs=1e-12), t
        traces.setdefault(c, []).append((clock[t], weights[t]))


def test_key_labels_add_label_search_and_a_weak_trace_on_menu_paths_only() -> None:
    labelled = ["New pool record", "Attach photo", "Count individuals"]
    aids = {"key_labels": {"commands": labelled, "trace_weight": 0.3, "search_s_per_label": 0.07}}
    world = _world(aids)
    cs = world.commands
    for policy in (always(k.MENU), mixed):
        on, off = _run(world, policy), _run(_world(), policy)
        if policy is mixed:  # the label's trace changes recall, so compare only up to the first difference
            first = next((t for t, (a, b) in enumerate(zip(on, off, strict=True)) if a["outcome"] != b["outcome"]),
                         len(on))
            assert first < len(on), "the labels' traces should change some hotkey outcome"
            on, off = on[:first], off[:first]
            # retrieval latency differs with the extra trace, so leave it out of the equality
            _same_except(on, off, {"label_search", "retrieval"})
        else:
            _same_except(on, off, {"label_search"})
        for r, t_sel in zip(on, _menu_counts(on), strict=True):
            c = r["command"]
            n_labels = sum(1 for j, name in enumerate(cs.names) if name in labelled and cs.menu_of[j] == cs.menu_of[c])
            want = 0.07 * n_labels / t_sel if t_sel else 0.0  # (1 - e) with e = 1 - 1/t
            assert r["time_s"]["label_search"] == pytest.approx(want, rel=1e-12, abs=0.0)
    rows = _run(world, always(k.MENU))
    weights = [0.3 if cs.names[r["command"]] in labelled else 0.0 for r in rows]  # menu weight is 0
    _check_recall_with_traces(world, rows, weights)
    assert max(r["p_recall"] for r in rows) > 0.0


def test_nudge_costs_reading_time_on_its_menu_selections_and_lays_its_trace() -> None:
    aids = {"nudge": {"commands": "all", "after_menu_selections": 2, "times": 2, "reading_s": 1.25,
                      "trace_weight": 0.6}}
    world = _world(aids)
    on, off = _run(world, always(k.MENU)), _run(_world(), always(k.MENU))
    _same_except(on, off, {"nudge"})
    counts = _menu_counts(on)
    for r, n in zip(on, counts, strict=True):
        assert r["time_s"]["nudge"] == (1.25 if n in (2, 3) else 0.0)
    _check_recall_with_traces(world, on, [0.6 if n in (2, 3) else 0.0 for n in counts])
    # a failed hotkey falls back to the menu, which counts as a menu selection and may show it
    rows = _run(world, mixed)
    for r, n in zip(rows, _menu_counts(rows), strict=True):
        assert r["time_s"]["nudge"] == (1.25 if n in (2, 3) else 0.0)


def test_menu_delay_adds_its_wait_to_every_menu_path_and_nothing_else() -> None:
    """The delay changes neither memory nor the hand, so under any action sequence every other
    operator, the outcome and the recall probability stay the same bit for bit."""
    only = ["Add species sighting", "New pool record"]
    world = _world({"menu_delay": {"commands": only, "delay_s": 0.8}})
    for policy in (mixed, always(k.LEARN), always(k.HOTKEY)):
        on, off = _run(world, policy), _run(_world(), policy)
        _same_except(on, off, {"menu_delay"})
        for a, b in zip(on, off, strict=True):
            assert (a["outcome"], a["p_recall"]) == (b["outcome"], b["p_recall"])
            named = world.commands.names[a["command"]] in only
            assert a["time_s"]["menu_delay"] == (0.8 if named and _menu_path(a) else 0.0)
            assert a["duration_s"] == pytest.approx(b["duration_s"] + a["time_s"]["menu_delay"], rel=1e-12)


def test_menu_lockout_makes_the_menu_path_type_the_hotkey_after_n_uses() -> None:
    world = _world({"menu_lockout": {"commands": "all", "after_uses": 3}})
    klm = world.costs.klm
    on, off = _run(world, always(k.MENU)), _run(_world(), always(k.MENU))
    _same_except(on, off, {"lockout", "H"})
    uses: dict[int, int] = {}
    prev_typed = False
    for r in on:
        c = r["command"]
        locked = uses.get(c, 0) >= 3
        keys = world.commands.keystrokes[c]
        assert r["time_s"]["lockout"] == (pytest.approx(klm.home_s + keys * klm.k_s, rel=1e-12) if locked else 0.0)
        # the typed hotkey leaves the hand on the keyboard: the next menu pays H to reach the mouse
        assert r["time_s"]["H"] == (klm.home_s if prev_typed else 0.0)
        assert r["outcome"] == "menu"
        uses[c] = uses.get(c, 0) + 1
        prev_typed = locked
    assert any(r["time_s"]["lockout"] > 0 for r in on)
    # lockout from the start (after 0 uses) also applies to learn trials and to failed hotkeys
    rows = _run(_world({"menu_lockout": {"commands": "all", "after_uses": 0}}), mixed)
    for r in rows:
        assert (r["time_s"]["lockout"] > 0) == _menu_path(r)


@pytest.mark.parametrize("sessions", ["first", "every"])
def test_warmup_block_costs_klm_time_at_session_start_and_lays_traces(sessions: str) -> None:
    practised = ["Close survey", "Record salinity"]
    aids = {"warmup": {"commands": practised, "sessions": sessions, "reading_s": 0.9, "trace_weight": 1.5}}
    world = _world(aids)
    klm, cs = world.costs.klm, world.commands
    idx = [cs.index(n) for n in practised]
    block = klm.home_s + sum(0.9 + klm.mental_s + cs.keystrokes[i] * klm.k_s for i in idx)
    on, off = _run(world, always(k.MENU)), _run(_world(), always(k.MENU))
    # after the block the hand is on the keyboard, so the first menu pays H
    _same_except(on, off, {"warmup", "H"})
    per = world.schedule.trials_per_session
    starts = {0} if sessions == "first" else {s * per for s in range(world.schedule.sessions)}
    for t, r in enumerate(on):
        assert r["time_s"]["warmup"] == (pytest.approx(block, rel=1e-12) if t in starts else 0.0)
        assert r["time_s"]["H"] == (klm.home_s if t in starts else 0.0)
    onset, _, gap = session_onsets(world.schedule)
    clock = onset - (1.0 - world.memory.gap_time_scale) * gap
    extra = {i: [(clock[t] - block, 1.5) for t in sorted(starts)] for i in idx}
    _check_recall_with_traces(world, on, [0.0] * len(on), extra)
    # always-hotkey: the practised hotkeys are recalled more often than without the block
    hot_on = [r for r in _run(world, always(k.HOTKEY)) if r["command"] in idx]
    hot_off = [r for r in _run(_world(), always(k.HOTKEY)) if r["command"] in idx]
    assert sum(r["p_recall"] for r in hot_on) > sum(r["p_recall"] for r in hot_off)


def test_each_aid_is_visible_only_in_its_own_operator_for_always_menu() -> None:
    """Switched on alone, each aid's time lands in its own operator (the others stay zero)."""
    one = {"key_labels": {"commands": "all"}, "nudge": {"commands": "all"}, "menu_delay": {"commands": "all"},
           "menu_lockout": {"commands": "all", "after_uses": 1}, "warmup": {"commands": ["Close survey"]}}
    own = dict(zip(AID_NAMES, AID_OPS, strict=True))
    for name, section in one.items():
        rows = _run(_world({name: section}), always(k.MENU))
        totals = {op: sum(r["time_s"][op] for r in rows) for op in AID_OPS}
        assert totals[own[name]] > 0, name
        assert all(v == 0.0 for op, v in totals.items() if op != own[name]), (name, totals)


# ---- every path agrees with aids on -----------------------------------------------------------

def test_env_batched_and_fused_paths_agree_with_every_aid_on() -> None:
    from shortcut_gym.agents import make_agent, run_episode
    from shortcut_gym.lab.sweep.batch import trial_table

    aids = {"key_labels": {"commands": "all"}, "nudge": {"commands": "all"},
            "menu_delay": {"commands": ["Close survey"]},
            "menu_lockout": {"commands": ["New pool record"], "after_uses": 4},
            "warmup": {"commands": ["Attach photo"], "sessions": "every"}}
    world = _world(aids, memory=None)
    seeds = [1, 2, 3]
    for spec in ({"name": "rescorla_wagner"}, {"name": "learn_first_k", "params": {"k": 1}}):
        fused = simulate_users(world, spec, seeds, fused=True)
        stepped = simulate_users(world, spec, seeds, fused=False)
        assert np.array_equal(fused.time_s, stepped.time_s)
        table = trial_table(world, simulate_users(world, spec, seeds, record="trials"), "x")
        for seed in seeds:
            env = CommandSelectionEnv(world=world)
            df = run_episode(env, make_agent(spec["name"], **spec.get("params", {})), seed=seed)
            mine = table[table["seed"] == seed]
            assert np.array_equal(mine["duration_s"].to_numpy(), df["duration_s"].to_numpy())
            assert np.array_equal(mine["t_warmup"].to_numpy(), df["t_warmup"].to_numpy())


# ---- every aid is a sweep axis ----------------------------------------------------------------

def test_aid_settings_are_sweep_axes_and_aid_free_specs_keep_their_run_ids() -> None:
    from shortcut_gym.lab.sweep.plan import plan_runs, world_from_settings
    from shortcut_gym.lab.sweep.run import compute_run
    from shortcut_gym.lab.sweep.spec import SweepSpecError, parse_spec

    plain = {"name": "t", "agents": [{"name": "always_menu"}], "seeds": {"count": 3},
             "base": {"schedule": {"sessions": 2, "trials_per_session": 10}}}
    assert "aids" not in plan_runs(parse_spec(plain))[0]["settings"]
    axes = {"aids.menu_delay.commands": {"values": ["none", "all"]},
            "aids.menu_delay.delay_s": {"values": [0.5, 2.0]},
            "aids.key_labels.commands": {"values": ["none", "all"]},
            "aids.nudge.after_menu_selections": {"values": [2]},
            "aids.menu_lockout.after_uses": {"values": [4]},
            "aids.warmup.sessions": {"values": ["every"]}}
    runs = plan_runs(parse_spec({**plain, "vary": {"parameters": axes}}))
    assert len(runs) == 8
    totals = {}
    for run in runs:
        world = world_from_settings(run["settings"])
        p = run["point"]
        assert world.aids.menu_delay.on == (p["aids.menu_delay.commands"] == "all")
        assert world.aids.menu_delay.delay_s == p["aids.menu_delay.delay_s"]
        assert world.aids.warmup.sessions == "every" and world.aids.menu_lockout.after_uses == 4
        blocks = compute_run(run)["blocks"]
        totals[(p["aids.menu_delay.commands"], p["aids.menu_delay.delay_s"], p["aids.key_labels.commands"])] = \
            float(blocks["time_s"].sum())
    # always menu: every trial is a menu path, so the delay adds delay x trials per user exactly
    for labels in ("none", "all"):
        for d in (0.5, 2.0):
            assert totals[("all", d, labels)] - totals[("none", d, labels)] == pytest.approx(20 * d, rel=1e-9)
        assert totals[("none", 0.5, labels)] == totals[("none", 2.0, labels)]
    assert totals[("none", 0.5, "all")] > totals[("none", 0.5, "none")]  # labels' search cost
    with pytest.raises(SweepSpecError, match="unknown setting 'delay' under aids.menu_delay"):
        parse_spec({**plain, "vary": {"parameters": {"aids.menu_delay.delay": {"values": [1.0]}}}})
    with pytest.raises(SweepSpecError, match="unknown command 'Nope'"):
        plan_runs(parse_spec({**plain, "base": {**plain["base"], "aids": {"nudge": {"commands": ["Nope"]}}}}))


# ---- the planner models the aids as the kernel applies them ---------------------------------

def test_planner_tracks_the_memory_the_aids_lay_and_reacts_to_their_costs() -> None:
    """The planner's tracked recall probability equals the simulator's on every trial with every
    aid on (its model of the labels', nudges' and warm-up's traces is the kernel's), and a locked
    or delayed menu makes it use hotkeys at least as much as the aid-free world does."""
    from shortcut_gym.agents import make_agent
    from shortcut_gym.agents.base import Transition
    from shortcut_gym.agents.rollout import context_of_world
    from shortcut_gym.envs.memory import recall_probability as p_of

    aids = {"key_labels": {"commands": "all", "trace_weight": 0.4}, "nudge": {"commands": "all"},
            "menu_lockout": {"commands": ["New pool record"], "after_uses": 3},
            "warmup": {"commands": ["Attach photo", "Close survey"], "sessions": "every"}}
    world = _world(aids, memory=None, schedule={"sessions": 2, "trials_per_session": 30})
    agent = make_agent("bounded_optimal", n_bins=12)
    agent.bind(context_of_world(world))
    env = CommandSelectionEnv(world=world)
    obs, info = env.reset(seed=4)
    agent.reset(4)
    m = world.memory
    onset, _, gap = session_onsets(world.schedule)
    clock = onset - (1.0 - m.gap_time_scale) * gap
    for t in range(world.horizon):
        a = agent.act(obs, info)
        c = int(info["target"])
        tracked = p_of(agent._activation(c, float(clock[t])), m.threshold, m.noise_s)
        nobs, r, term, trunc, info = env.step(a)
        assert info["p_recall"] == pytest.approx(tracked, rel=1e-9, abs=1e-12), t
        agent.observe(Transition(obs, a, r, nobs, info, term, trunc))
        obs = nobs
    base = simulate_users(_world(memory=None), {"name": "bounded_optimal", "n_bins": 12}, range(8))
    for pushed in ({"menu_lockout": {"commands": "all", "after_uses": 2}},
                   {"menu_delay": {"commands": "all", "delay_s": 3.0}}):
        aided = simulate_users(_world(pushed, memory=None), {"name": "bounded_optimal", "n_bins": 12}, range(8))
        assert aided.actions[:, :, k.HOTKEY].sum() >= base.actions[:, :, k.HOTKEY].sum(), pushed
