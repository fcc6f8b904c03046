"""``shortcut-gym recover``: parameter and model recovery studies on simulated participants."""

from __future__ import annotations

import argparse

import pandas as pd

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.checks.population import default_population, read_population
from shortcut_gym.lab.checks.recovery import model_recovery, parameter_recovery
from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import (
    MODEL_HELP,
    add_common,
    add_model_options,
    claim_output,
    models_of,
    refuse_planner_agents,
    status,
    world_of,
    world_words,
)
from shortcut_gym.lab.cli.ranges import input_file, whole_number
from shortcut_gym.lab.report import (
    fit_quality_section,
    markdown_table,
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
    add_common(p, models=False)
    add_model_options(p, MODEL_HELP + "; true parameters drawn over each parameter's plausible range")
    p.add_argument("--population", type=input_file, default=None,
                   help="population spec (YAML: per model, a distribution per parameter and a participant count); "
                        "its models are the ones studied (instead of --model)")
    p.add_argument("--participants", type=whole_number(1), default=None,
                   help="simulated participants per model (default 20, or the population spec's counts)")
    p.add_argument("--study", choices=["parameters", "models", "both"], default="both",
                   help="parameter recovery per model, model-recovery confusion matrix, or both")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write recovery tables and plots, and how the true parameters were drawn."""
    claim_output(args.out, args)
    world = world_of(args)
    if (args.model is None and args.model_file is None) == (args.population is None):
        raise CLIError("recover needs either --model/--model-file options or --population (not both)")
    if args.population is not None:
        try:
            populations = read_population(args.population)
        except ConfigError as err:
            raise CLIError(str(err)) from None
        if args.participants is not None:
            populations = [type(p)(p.spec, args.participants, p.laws, p.source) for p in populations]
    else:
        populations = [default_population(s, args.participants or 20) for s in models_of(args)]
    specs = [p.spec for p in populations]
    refuse_planner_agents(world, "recover", "--model" if args.population is None else "--population",
                          [(s.label, s.name) for s in specs])
    by_label = {p.spec.label: p for p in populations}
    if args.study in ("models", "both") and len(specs) < 2:
        raise CLIError("model recovery (--study models or both) needs at least two models")
    args.out.mkdir(parents=True, exist_ok=True)
    drawn = pd.DataFrame([{"model": p.spec.label, "parameter": n, "drawn": how, "participants": p.participants}
                          for p in populations for n, how in p.describe().items()])
    entries = [(write_table(drawn, args.out, "true_parameters_drawn"), "how the true parameters were drawn")]
    sections = [("How the true parameters were drawn", world_words(world, args) + " Source: "
                 + (str(args.population) if args.population else "each parameter's documented plausible range")
                 + ".\n\n" + markdown_table(drawn))]
    if args.study in ("parameters", "both"):
        for spec in specs:
            pop = by_label[spec.label]
            pairs, summary = parameter_recovery(world, spec, pop.participants, args.seed, args.starts, args.jobs,
                                                progress=not args.quiet, population=pop)
            entries.append((write_table(summary, args.out, f"parameter_recovery_{spec.label}"),
                            f"{spec.label}: correlation, bias, RMSE, interval coverage per parameter"))
            entries.append((write_table(pairs, args.out, f"parameter_pairs_{spec.label}"), "true vs fitted values"))
            entries.append((plot_parameter_recovery(pairs, summary, args.out / f"parameter_recovery_{spec.label}.png"),
                            "true vs fitted scatter"))
            sections.append(parameter_recovery_section(spec.label, summary))
            print(summary.drop(columns=["drawn"]).to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    if args.study in ("models", "both"):
        confusion, fits = model_recovery(world, specs, args.participants or 20, args.seed, args.starts, args.jobs,
                                         progress=not args.quiet, populations=by_label)
        entries.append((write_table(confusion, args.out, "model_confusion", index=True),
                        "rows generating model, columns winning model (fractions)"))
        entries.append((write_table(fits, args.out, "model_recovery_fits"), "all fits of the model-recovery study"))
        entries.append((plot_confusion(confusion, args.out / "model_confusion.png"), "confusion heat map"))
        sections.append(model_recovery_section(confusion))
        heading, body = fit_quality_section(
            fits, "`model_recovery_fits.csv` for every estimate with its standard error and interval")
        sections.append((f"{heading} (model-recovery fits)", body))
        print(confusion.to_string(float_format=lambda v: f"{v:.2f}"))
    index = write_index(args.out, entries, "Recovery studies", sections)
    status(f"wrote {index.parent}")
    return 0
