"""``shortcut-gym fit``: fit models to a trial log, one row per participant x model."""

from __future__ import annotations

import argparse
from pathlib import Path

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.data.logs import read_log
from shortcut_gym.lab.fitting import ModelSpec, context_for, fit_log, parse_model, parse_prior

MODEL_HELP = ("model as [label=]agent[:key=value,...]; keys that are parameters are held fixed, others are "
              "options, '+' makes a list (repeatable), e.g. ck=choice_kernel:lapse=0.02")


def add_common(p: argparse.ArgumentParser, models: bool = True) -> None:
    """Options shared by the analysis subcommands."""
    p.add_argument("--scenario", default=None, help="scenario preset or YAML whose commands the log names")
    if models:
        p.add_argument("--model", action="append", required=True, help=MODEL_HELP)
    p.add_argument("--starts", type=int, default=10, help="optimiser starts per participant x model")
    p.add_argument("--seed", type=int, default=0, help="seed of the random starts (and simulations)")
    p.add_argument("--jobs", type=int, default=1, help="worker processes")
    p.add_argument("--out", type=Path, required=True, help="output folder (created)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def check_counts(args: argparse.Namespace, **extra: int) -> None:
    """ValueError naming a count option below 1."""
    for name, value in {"--starts": args.starts, "--jobs": args.jobs, **extra}.items():
        if value < 1:
            raise ValueError(f"{name} must be >= 1, got {value}")


def models_of(args: argparse.Namespace) -> list[ModelSpec]:
    """The ``--model`` options parsed; labels must be unique."""
    specs = [parse_model(m) for m in args.model]
    labels = [s.label for s in specs]
    dup = {lab for lab in labels if labels.count(lab) > 1}
    if dup:
        raise ValueError(f"--model labels repeat: {sorted(dup)}; name them label=agent:...")
    return specs


def priors_of(texts: list[str] | None, specs: list[ModelSpec]) -> dict[str, dict]:
    """``--prior label:param=family:a:b`` -> {label: {param: distribution}}."""
    out: dict[str, dict] = {}
    labels = {s.label for s in specs}
    for text in texts or []:
        label, colon, rest = text.partition(":")
        if not colon or label not in labels:
            raise ValueError(f"--prior {text!r} must start with a model label from {sorted(labels)} and ':'")
        name, dist = parse_prior(rest)
        out.setdefault(label, {})[name] = dist
    return out


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``fit`` subcommand."""
    p = sub.add_parser("fit", help="fit models to a trial log by maximum likelihood (or MAP with --prior)")
    p.add_argument("log", type=Path, help="trial log (.csv or .parquet)")
    add_common(p)
    p.add_argument("--prior", action="append", default=None,
                   help="label:param=family:a:b (normal, beta, gamma, lognormal) for a MAP fit (repeatable)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Fit and write ``fits.csv``."""
    check_counts(args)
    world = make_world(args.scenario)
    specs = models_of(args)
    priors = priors_of(args.prior, specs)
    log = read_log(args.log, world.commands)
    fits = fit_log(log, specs, context_for(log, world.commands.names), args.starts, args.seed, args.jobs, priors,
                   progress=not args.quiet)
    args.out.mkdir(parents=True, exist_ok=True)
    path = args.out / "fits.csv"
    fits.to_csv(path, index=False)
    show = fits[["participant", "model", "loglik", "n_params", "aic", "bic", "converged"]]
    print(show.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print(f"wrote {path}")
    return 0
