"""``shortcut-gym recover``: parameter and model recovery studies on simulated participants."""

from __future__ import annotations

import argparse

from shortcut_gym.envs.world import make_world
from shortcut_gym.lab.checks.recovery import model_recovery, parameter_recovery
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import add_common, models_of
from shortcut_gym.lab.cli.ranges import whole_number
from shortcut_gym.lab.report import (
    model_recovery_section,
    parameter_recovery_section,
    plot_confusion,
    plot_parameter_recovery,
    write_index,
    write_table,
)


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``recover`` subcommand."""
    p = sub.add_parser("recover", help="simulate with known parameters/models, refit, report recovery")
    add_common(p)
    p.add_argument("--participants", type=whole_number(1), default=20, help="simulated participants per model")
    p.add_argument("--study", choices=["parameters", "models", "both"], default="both",
                   help="parameter recovery per model, model-recovery confusion matrix, or both")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write recovery tables and plots."""
    world = make_world(args.scenario)
    specs = models_of(args)
    if args.study in ("models", "both") and len(specs) < 2:
        raise CLIError("model recovery (--study models or both) needs at least two --model options")
    args.out.mkdir(parents=True, exist_ok=True)
    entries = []
    sections = []
    if args.study in ("parameters", "both"):
        for spec in specs:
            pairs, summary = parameter_recovery(world, spec, args.participants, args.seed, args.starts, args.jobs,
                                                progress=not args.quiet)
            entries.append((write_table(summary, args.out, f"parameter_recovery_{spec.label}"),
                            f"{spec.label}: correlation, bias, RMSE per parameter"))
            entries.append((write_table(pairs, args.out, f"parameter_pairs_{spec.label}"), "true vs fitted values"))
            entries.append((plot_parameter_recovery(pairs, summary, args.out / f"parameter_recovery_{spec.label}.png"),
                            "true vs fitted scatter"))
            sections.append(parameter_recovery_section(spec.label, summary))
            print(summary.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    if args.study in ("models", "both"):
        confusion, fits = model_recovery(world, specs, args.participants, args.seed, args.starts, args.jobs,
                                         progress=not args.quiet)
        entries.append((write_table(confusion, args.out, "model_confusion", index=True),
                        "rows generating model, columns winning model (fractions)"))
        entries.append((write_table(fits, args.out, "model_recovery_fits"), "all fits of the model-recovery study"))
        entries.append((plot_confusion(confusion, args.out / "model_confusion.png"), "confusion heat map"))
        sections.append(model_recovery_section(confusion))
        print(confusion.to_string(float_format=lambda v: f"{v:.2f}"))
    index = write_index(args.out, entries, "Recovery studies", sections)
    print(f"wrote {index.parent}")
    return 0
