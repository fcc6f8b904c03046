"""``shortcut-gym compare``: compare fitted models (summed criteria, random-effects BMS)."""

from __future__ import annotations

import argparse

import pandas as pd

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.lab.cli import CLIError, one_line
from shortcut_gym.lab.cli.options import add_overwrite, add_world_options, claim_output, status, world_of, world_words
from shortcut_gym.lab.cli.ranges import input_file, output_folder, positive_number
from shortcut_gym.lab.compare import bms_of_fits, comparison_table, summed_criteria
from shortcut_gym.lab.report import comparison_sections, fit_quality_section, plot_comparison, write_index, write_table


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``compare`` subcommand."""
    p = sub.add_parser("compare", help="compare models from a fits.csv written by 'fit'")
    p.add_argument("fits", type=input_file, help="fits.csv from 'shortcut-gym fit'")
    p.add_argument("--prior-count", type=positive_number, default=1.0,
                   help="Dirichlet prior count per model for the BMS (default 1)")
    p.add_argument("--out", type=output_folder, required=True, help="output folder (created)")
    add_world_options(p)
    add_overwrite(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write comparison.csv, summed_criteria.csv, bms.csv and comparison.png."""
    claim_output(args.out, args)
    world = world_of(args)  # checked, and named in index.md beside the fits it compares
    try:
        fits = pd.read_csv(args.fits)
        if "participant" in fits.columns:  # ids as written ("NA" and "None" are ids, not missing values)
            fits["participant"] = pd.read_csv(args.fits, usecols=["participant"], dtype=str,
                                              keep_default_na=False)["participant"]
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        raise CLIError(f"{args.fits}: not a readable fits table ({one_line(err)})") from None
    try:
        table, summed, bms = comparison_table(fits), summed_criteria(fits), bms_of_fits(fits, args.prior_count)
    except ConfigError as err:
        raise CLIError(f"{args.fits}: {err}") from None
    args.out.mkdir(parents=True, exist_ok=True)
    entries = [
        (write_table(table, args.out, "comparison"), "per participant x model criteria"),
        (write_table(summed, args.out, "summed_criteria"), "summed criteria per model"),
        (write_table(bms.table(), args.out, "bms"), "random-effects BMS"),
        (plot_comparison(summed, bms, args.out / "comparison.png"), "summed BIC and BMS plot"),
    ]
    sections = comparison_sections(summed, bms) + [fit_quality_section(fits),
                                                   ("Study world", world_words(world, args))]
    index = write_index(args.out, entries, "Model comparison", sections)
    print(summed.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print(bms.table().to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    status(f"wrote {index.parent}")
    return 0
