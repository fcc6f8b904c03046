"""``shortcut-gym compare``: compare fitted models (summed criteria, random-effects BMS)."""

from __future__ import annotations

import argparse

import pandas as pd

from shortcut_gym.envs.errors import ConfigError
from shortcut_gym.envs.world import World
from shortcut_gym.lab.cli import CLIError, one_line
from shortcut_gym.lab.cli.options import (
    add_overwrite,
    add_world_options,
    claim_output,
    status,
    warn,
    world_of,
    world_words,
)
from shortcut_gym.lab.cli.ranges import input_file, output_folder, positive_number
from shortcut_gym.lab.cli.world_note import NOTE_NAME, read_note, world_given
from shortcut_gym.lab.compare import bms_of_fits, comparison_table, summed_criteria
from shortcut_gym.lab.report import comparison_sections, fit_quality_section, plot_comparison, write_index, write_table


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``compare`` subcommand."""
    p = sub.add_parser("compare", help="compare models from a fits.csv written by 'fit'")
    p.add_argument("fits", type=input_file, help="fits.csv from 'shortcut-gym fit'")
    p.add_argument("--prior-count", type=positive_number, default=1.0,
                   help="Dirichlet prior count per model for the BMS (default 1)")
    p.add_argument("--out", type=output_folder, required=True, help="output folder (created)")
    add_world_options(p)  # checked against the fits' world.json when it has one
    add_overwrite(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write comparison.csv, summed_criteria.csv, bms.csv and comparison.png."""
    claim_output(args.out, args)
    world = world_of(args)  # checked, and named in index.md beside the fits it compares
    study_world = study_world_words(world, args)
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
                                                   ("Study world", study_world)]
    index = write_index(args.out, entries, "Model comparison", sections)
    print(summed.to_string(index=False, float_format=lambda v: f"{v:.2f}"))
    print(bms.table().to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    status(f"wrote {index.parent}")
    return 0


def study_world_words(world: World, args: argparse.Namespace) -> str:
    """The words of index.md's "Study world": the fits' own world (their ``world.json``) when no world
    option is given; the options' world when it is the fits' world, or when it is another but no model
    of the fits reads the world (with a warning); another world that a model of the fits reads is refused."""
    note = read_note(args.fits)
    if note is None:
        return world_words(world, args)
    if not world_given(args):
        return f"{note.words} It is the world the fits were made in, read from their {NOTE_NAME}."
    if world.problem_digest() == note.problem_digest:
        return world_words(world, args)
    both = (f"the world options name {_bare(world_words(world, args))} (world {world.problem_digest()[:12]}), "
            f"but the fits were made in {_bare(note.words)} (world {note.problem_digest[:12]}, {note.path})")
    if note.readers:
        raise CLIError(f"{both}; the fits of {', '.join(note.readers)} depend on their world: give compare the "
                       "world options the fit was given, or none to take the fits' own world")
    warn(f"{both}; no model of these fits reads the world ({', '.join(note.others)}), so they hold in either; "
         "index.md names the options' world")
    return world_words(world, args)


def _bare(words: str) -> str:
    """World words without their leading 'World: ' and closing full stop, to quote in a sentence."""
    return words.removeprefix("World: ").rstrip(".")
