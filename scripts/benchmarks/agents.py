"""Benchmark the agent zoo; every figure is printed next to a reference measured in the same run.

1. Per-trial decision cost (act + observe) of each learning model and of the planner lookup,
   versus one CommandSelection-v0 env step; also the batched policy and the compiled likelihood.
2. SB3 PPO frames per second on CommandSelection-v0 versus CartPole-v1 (same settings; target >= 0.8x).
3. Planner plan time versus planning horizon (uses left), the dynamic program alone and with the
   choice of the executed policy.
4. The planner's optimality gap against the exact small-world solver (the documented family).

``quick`` shrinks every part: 3 repeats, 64 batched users, a PPO run of 256 steps with rollouts
of 128 (instead of SB3's default 2,048), planning horizons up to 100 uses, 3 small worlds.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable

import gymnasium as gym
import numpy as np

import shortcut_gym.envs  # noqa: F401 - registers CommandSelection-v0
from benchmarks.timing import Out, median_seconds
from shortcut_gym.agents import make_agent, run_episode
from shortcut_gym.agents.base import Transition
from shortcut_gym.agents.learning import TrialArrays
from shortcut_gym.agents.planner import plan_world
from shortcut_gym.agents.rollout import context_of
from shortcut_gym.envs import BatchSimulator, CommandSelectionEnv, make_world
from shortcut_gym.envs.world import World

REPEATS = 5


def median_time(fn: Callable[[], object], repeats: int = REPEATS) -> float:
    """Median seconds of ``repeats`` calls after one untimed warm-up call (numba compile, caches)."""
    return median_seconds(fn, repeats, warm_up=True)


def env_step_us(env: gym.Env, steps: int = 4000, repeats: int = REPEATS) -> float:
    """Median microseconds per ``env.step(0)`` over blocks of ``steps`` steps (resets timed too)."""
    def run():
        env.reset(seed=0)
        n = 0
        while n < steps:
            _, _, term, trunc, _ = env.step(0)
            n += 1
            if term or trunc:
                env.reset(seed=n)
    return median_time(run, repeats) / steps * 1e6


def record_episode(env: gym.Env, agent, seed: int) -> list:
    """(obs, info, Transition) of every trial of one episode driven by ``agent``."""
    agent.bind(context_of(env))
    obs, info = env.reset(seed=seed)
    agent.reset(seed)
    out, done = [], False
    while not done:
        a = agent.act(obs, info)
        nobs, r, term, trunc, step_info = env.step(a)
        tr = Transition(obs, a, r, nobs, step_info, term, trunc)
        agent.observe(tr)
        out.append((obs, info, tr))
        obs, info, done = nobs, step_info, term or trunc
    return out


def decision_costs(world: World, quick: bool = False, out: Out = print) -> None:
    """Part 1: act + observe cost per trial against one env step; batched policy; compiled likelihood."""
    repeats = 3 if quick else REPEATS
    env = CommandSelectionEnv(world=world)
    steps = 1000 if quick else 4000
    step = env_step_us(env, steps, repeats)
    cart = env_step_us(gym.make("CartPole-v1"), steps, repeats)
    out(f"== 1. per-trial decision cost (median of {repeats} episodes of {world.horizon} trials)")
    out(f"reference: CommandSelection-v0 env step {step:.1f} us; CartPole-v1 step {cart:.1f} us")
    out(f"{'agent':<22}{'act+observe us':>16}{'x env step':>12}")
    records = record_episode(env, make_agent("rescorla_wagner"), seed=0)
    every = {"mechanisms": ["value", "choice_kernel", "memory_aware", "planning", "incidental", "forgetting",
                            "perseveration", "lapse"]}
    for label, name, kw in [("rescorla_wagner", "rescorla_wagner", {}), ("choice_kernel", "choice_kernel", {}),
                            ("rw_choice_kernel", "rw_choice_kernel", {}),
                            ("composed_learner", "composed_learner", every),
                            ("bounded_optimal", "bounded_optimal", {"world": world}),
                            ("  plan argmax only", "bounded_optimal", {"world": world, "select_users": 0})]:
        agent = make_agent(name, **kw)
        agent.bind(context_of(env))
        agent.reset(0)  # the planner solves here, outside the timing

        def replay(a=agent):
            a.reset(0)  # fresh state each repeat (the planner keeps its solved plan)
            for obs, info, tr in records:
                a.act(obs, info)
                a.observe(tr)
        cost = median_time(replay, repeats) / len(records) * 1e6
        if name == "bounded_optimal" and "select_users" not in kw:
            label = f"{label} [{agent.plan.choice.label}]"
        out(f"{label:<22}{cost:>16.1f}{cost / step:>12.2f}")
    # batched policy and compiled likelihood, per user-trial
    users = 64 if quick else 1024
    agent = make_agent("composed_learner", **every)
    agent.bind(context_of(env))
    seeds = list(range(users))

    def batched():
        sim = BatchSimulator(world)
        sim.reset(seeds=seeds)
        pol = agent.batch_policy(users, seeds)
        for _ in range(world.horizon):
            tg = sim.targets().copy()
            acts = pol.actions(tg, sim.obs)
            r = sim.step(acts)
            pol.observe(tg, acts, sim.outcome, -r)

    def sim_only():
        sim = BatchSimulator(world)
        sim.reset(seeds=seeds)
        acts = np.zeros(users, dtype=np.int64)
        for _ in range(world.horizon):
            sim.step(acts)

    b = median_time(batched, 3) / (users * world.horizon) * 1e9
    s = median_time(sim_only, 3) / (users * world.horizon) * 1e9
    out(f"batched composed_learner (every mechanism), {users} users: {b:.0f} ns per user-trial incl. simulator "
        f"(simulator alone {s:.0f} ns; policy {max(b - s, 0):.0f} ns = {max(b - s, 0) / s:.2f}x simulator)")
    df = run_episode(env, agent, seed=0)
    f = agent.likelihood_function(TrialArrays.from_frame(df, world.commands.n_commands))
    theta = np.array([agent.params[n] for n in agent.param_specs()])
    evals = 20 if quick else 100
    ll = median_time(lambda: [f(theta) for _ in range(evals)], repeats) / evals
    out(f"compiled likelihood over {len(df)} trials: {ll * 1e6:.1f} us per evaluation "
        f"({ll / len(df) * 1e9:.0f} ns per trial = {ll / len(df) * 1e6 / step:.3f}x env step)")


def ppo_fps(quick: bool = False, out: Out = print) -> None:
    """Part 2: SB3 PPO frames per second on CommandSelection-v0 against CartPole-v1, same settings."""
    import torch
    from stable_baselines3 import PPO

    threads = torch.get_num_threads()
    torch.set_num_threads(1)
    steps, repeats = (256, 1) if quick else (4096, 3)
    settings = {"n_steps": 128, "batch_size": 64} if quick else {}
    shown = "n_steps=128, batch_size=64" if quick else "SB3 defaults"
    out(f"\n== 2. SB3 PPO frames per second (MlpPolicy, {shown}, 1 torch thread, "
        f"{steps} steps, median of {repeats})")
    fps = {}
    try:
        for env_id in ("CartPole-v1", "shortcut_gym/CommandSelection-v0"):
            def train(e=env_id):
                PPO("MlpPolicy", gym.make(e), seed=0, device="cpu", verbose=0, **settings).learn(steps)
            fps[env_id] = steps / median_time(train, repeats)
    finally:
        torch.set_num_threads(threads)
    ratio = fps["shortcut_gym/CommandSelection-v0"] / fps["CartPole-v1"]
    out(f"CartPole-v1 {fps['CartPole-v1']:.0f} fps; CommandSelection-v0 "
        f"{fps['shortcut_gym/CommandSelection-v0']:.0f} fps; ratio {ratio:.2f}x (target >= 0.8x)")


def planner_growth(world: World, quick: bool = False, out: Out = print) -> None:
    """Part 3: the planner's plan time against the planning horizon (uses left): the dynamic
    program alone (``select_users=0``) and the whole plan (with the choice of the executed policy
    on common simulated users, which costs about the same at every horizon)."""
    out("\n== 3. planner plan time (12 commands) versus planning horizon")
    out("(before this rework, the issue's figures: 0.27 s at 25 uses to 10.2 s at 3,200)")
    repeats = 1 if quick else 3
    mdp_only = median_time(lambda: plan_world(world, max_uses=1, select_users=0), repeats)
    out(f"building the 12 MDPs (independent of the horizon): {mdp_only * 1e3:.1f} ms")
    out(f"{'max uses':>9}{'DP only s':>11}{'DP us per use':>15}{'with choice s':>15}")
    for n in (25, 50, 100) if quick else (25, 50, 100, 200, 400, 800, 1600, 3200):
        dp = median_time(lambda n=n: plan_world(world, max_uses=n, select_users=0), repeats)
        whole = median_time(lambda n=n: plan_world(world, max_uses=n), 1)
        out(f"{n:>9}{dp:>11.2f}{(dp - mdp_only) / n * 1e6:>15.1f}{whole:>15.2f}")


def optimality_gaps(quick: bool = False, out: Out = print) -> None:
    """Part 4: the planner's optimality gap against the exact small-world solver, on the documented
    family :data:`shortcut_gym.agents.planner.exact.SMALL_WORLDS` (exact expected seconds per user)."""
    from shortcut_gym.agents.planner.exact import SMALL_WORLDS, evaluate_exactly, exact_mdp, small_world

    worlds = SMALL_WORLDS[:3] if quick else SMALL_WORLDS
    out("\n== 4. optimality gap on small worlds (exact expected seconds per user; gap = planner / optimum - 1)")
    out(f"{'world':<42}{'states':>8}{'optimum s':>11}{'planner s':>11}{'gap %':>8}{'plan alone %':>14}"
        f"{'menu %':>8}  executed policy")
    gaps = []
    for label, kwargs in worlds:
        w = small_world(**kwargs)
        m = exact_mdp(w)
        planner = make_agent("bounded_optimal", world=w)
        mine = evaluate_exactly(w, planner)
        alone = evaluate_exactly(w, make_agent("bounded_optimal", world=w, select_users=0))
        menu = evaluate_exactly(w, make_agent("always_menu"))
        opt = m.value_s
        gaps.append(mine / opt - 1)
        out(f"{label:<42}{m.n_states:>8}{opt:>11.3f}{mine:>11.3f}{100 * (mine / opt - 1):>8.3f}"
            f"{100 * (alone / opt - 1):>14.3f}{100 * (menu / opt - 1):>8.3f}  {planner.plan.choice.label}")
    out(f"worst gap {100 * max(gaps):.3f}% (target <= 0.5%); equal to the optimum (|gap| < 1e-9) on "
        f"{sum(abs(g) < 1e-9 for g in gaps)} of {len(gaps)}")


def run(quick: bool = False, out: Out = print) -> None:
    """All three parts on the default world, warnings silenced (SB3 and gymnasium chatter)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        world = make_world()
        decision_costs(world, quick, out)
        ppo_fps(quick, out)
        planner_growth(world, quick, out)
        optimality_gaps(quick, out)
