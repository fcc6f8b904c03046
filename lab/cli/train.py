"""``shortcut-gym train``: train an SB3 (ppo, a2c, dqn) or tabular (q_learning, sarsa) agent on a
world and save its model, which ``simulate``, ``sweep`` and ``score`` then load with
``--agent NAME:model_path=FILE``. The model keeps the record of the world it was trained on and
is refused on any other unless ``allow_other_world=true`` (:mod:`shortcut_gym.agents.world_record`).

``--out`` is used as given: its suffix must be the agent's (``.zip`` for SB3, which also writes
``.obs_norm.npz`` beside it while ``normalize`` is on; ``.npz`` for tabular agents), and a file
that exists is replaced only with ``--overwrite``; both are checked before any training."""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import Any

from shortcut_gym.agents.registry import agent_from_spec, make_agent
from shortcut_gym.agents.rollout import context_of, evaluate_agent
from shortcut_gym.agents.sb3 import SB3Agent
from shortcut_gym.agents.sb3.files import norm_path
from shortcut_gym.agents.tabular import TabularAgent
from shortcut_gym.envs.env import CommandSelectionEnv
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import (
    add_agent_options,
    add_overwrite,
    add_world_options,
    agent_specs_of,
    claim_output,
    detail,
    status,
    world_of,
)
from shortcut_gym.lab.cli.ranges import MAX_SEED, output_file, seed, whole_number

#: Agents ``train`` knows how to train and save (registry names).
TRAINABLE = ("ppo", "a2c", "dqn", "q_learning", "sarsa")
#: Most trials of experience one ``train`` call gathers.
MAX_TRIALS = 100_000_000
#: The epilog of ``train --help``: the two ways to give SB3 hyperparameters.
HYPERPARAMETER_HELP = """\
SB3 hyperparameters (ppo, a2c, dqn) are the keyword arguments of stable_baselines3.PPO, A2C or DQN
(all but policy, env, seed, verbose and device, which train sets). Give them either way:
  on the line, beside the agent's options:
    --agent 'ppo:n_steps=64,learning_rate=3e-4,gamma=0.99'
    --agent 'dqn:buffer_size=5000,learning_starts=100,train_freq=[4, step]'
  in an agent spec file, under hyperparameters: (nested values such as policy_kwargs only here):
    --agent-file ppo.yaml   holding
      name: ppo
      hyperparameters: {n_steps: 64, learning_rate: 3.0e-4, policy_kwargs: {net_arch: [32, 32]}}
The same keys are allowed in both places; one key given twice with two values is refused, and an
unknown key is refused listing the known ones. Reference: docs/configs.md, Agent spec."""


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``train`` subcommand."""
    p = sub.add_parser("train", help="train an SB3 or tabular agent and save its model for --agent ...:model_path=",
                       epilog=HYPERPARAMETER_HELP, formatter_class=argparse.RawDescriptionHelpFormatter)
    add_world_options(p, sessions=True)
    add_agent_options(p, f"the agent to train, one of {', '.join(TRAINABLE)} (options such as "
                         "deterministic=true are kept for its evaluation; SB3 hyperparameters go beside them, "
                         "ppo:n_steps=64, see below)")
    p.add_argument("--trials", type=whole_number(1, MAX_TRIALS), default=40_000,
                   help="trials of experience (SB3: timesteps; tabular: whole simulated users of the horizon)")
    p.add_argument("--seed", type=seed, default=0, help="seed of the training users (and the model's own draws)")
    p.add_argument("--envs", type=whole_number(1, 1024), default=8, help="parallel simulated users (SB3 only)")
    p.add_argument("--out", type=output_file, required=True,
                   help="model file to write, used as given: SB3 a .zip (plus .obs_norm.npz beside it), "
                        "tabular a .npz")
    add_overwrite(p)
    p.add_argument("--eval-users", type=whole_number(0, 100_000), default=20,
                   help="users (seeds after the training ones) to compare the trained agent with always-menu on")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=run)


def files_to_write(agent: SB3Agent | TabularAgent, name: str, out: Path) -> list[Path]:
    """The files training ``agent`` writes for ``--out out``: ``out`` itself (its suffix checked
    against the agent's) and, for SB3 with ``normalize`` on, its observation statistics."""
    suffix, what = ((".zip", "an SB3 model zip (its observation statistics go in .obs_norm.npz beside it)")
                    if isinstance(agent, SB3Agent) else (".npz", "a Q table .npz"))
    if out.suffix != suffix:
        given = f"the suffix {out.suffix!r}" if out.suffix else "no suffix"
        raise CLIError(f"--out {out}: {name} writes {what}, so the file must end in {suffix} ({given} given); "
                       f"give --out {out.with_suffix(suffix)}")
    if isinstance(agent, SB3Agent) and agent.normalize:
        return [out, norm_path(out)]
    return [out]


def _refuse_untrainable(specs: list[tuple[dict[str, Any], str]]) -> None:
    """One agent spec, of a trainable agent, naming no model file (faults name the spec's source)."""
    if len(specs) != 1:
        raise CLIError(f"train takes exactly one --agent or --agent-file, got {len(specs)}")
    spec, where = specs[0]
    if spec["name"] not in TRAINABLE:
        raise CLIError(f"train: {where}: agent {spec['name']!r} is not trained by this command; trainable: "
                       f"{list(TRAINABLE)}")
    if "model_path" in spec:
        raise CLIError(f"train: {where}: the agent spec names a model_path; give the file to write with --out")


def run(args: argparse.Namespace) -> int:
    """Train, save, and print the trained agent's time per user against always-menu."""
    spec = agent_specs_of(args, refuse=_refuse_untrainable)[0]
    world = world_of(args)
    env = CommandSelectionEnv(world=world)
    agent = agent_from_spec(spec)
    if not isinstance(agent, SB3Agent | TabularAgent):  # pragma: no cover - TRAINABLE lists only the two kinds
        raise CLIError(f"train: no training for {spec['name']!r}")
    for path in files_to_write(agent, spec["name"], Path(args.out)):
        claim_output(path, args, "--out" if path == Path(args.out) else "--out (its observation statistics)")
    episodes = math.ceil(args.trials / world.horizon)
    first_eval = args.seed + (episodes if isinstance(agent, TabularAgent) else 0) + 1
    if first_eval + args.eval_users > MAX_SEED:
        raise CLIError(f"--seed {args.seed}: the evaluation seeds would exceed {MAX_SEED}")
    detail(f"training on {args.trials} trials of experience from seed {args.seed}; model file {args.out}")
    if isinstance(agent, SB3Agent):
        agent.train(world, total_timesteps=args.trials, seed=args.seed, progress_bar=not args.quiet, n_envs=args.envs)
        trained = f"{args.trials} timesteps on {args.envs} parallel users"
    else:
        agent.bind(context_of(env))
        agent.train(env, episodes, seed=args.seed, progress_bar=not args.quiet)
        trained = f"{episodes} simulated users of {world.horizon} trials"
    Path(args.out).parent.mkdir(parents=True, exist_ok=True)
    path = agent.save(Path(args.out))
    assert path == Path(args.out), (path, args.out)  # files_to_write checked the suffix save keeps
    status(f"trained {spec['name']} for {trained}; wrote {path}")
    if args.eval_users:
        seeds = range(first_eval, first_eval + args.eval_users)
        detail(f"evaluating on {args.eval_users} new users, seeds {seeds.start}..{seeds.stop - 1}")
        mine = evaluate_agent(env, agent, seeds)["total_time_s"].mean()
        menu = evaluate_agent(env, make_agent("always_menu"), seeds)["total_time_s"].mean()
        print(f"time per user over {args.eval_users} new users: {spec['name']} {mine:.1f} s, "
              f"always_menu {menu:.1f} s ({mine - menu:+.1f} s per user)")
    # a model trained without normalisation is refused by the default normalize=true: say so in the hint
    plain = ",normalize=false" if isinstance(agent, SB3Agent) and not agent.normalize else ""
    status(f"load it with --agent {spec['name']}:model_path={path}{plain}")
    return 0
