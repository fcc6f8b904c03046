"""``shortcut-gym sweep``: run a sweep spec into a folder (resumable), locally or on Ray."""

from __future__ import annotations

import argparse
from pathlib import Path

from shortcut_gym.lab.cli import CLIError
from shortcut_gym.lab.cli.options import add_agent_options, agent_specs_of, detail, status, warn
from shortcut_gym.lab.cli.ranges import optional_output_folder, output_folder, positive_number, whole_number
from shortcut_gym.lab.sweep.backends import BackendError


class SweepArgumentError(CLIError):
    """A bad ``sweep`` option (the CLI exits 2 naming it)."""


def register(sub: argparse._SubParsersAction) -> None:
    """Add the ``sweep`` subcommand."""
    p = sub.add_parser("sweep", help="run a sweep spec (configs/sweeps/*.yaml) into a resumable folder")
    p.add_argument("spec", help="sweep spec YAML path, or the name of a bundled spec")
    p.add_argument("--out", type=output_folder, default=None, help="sweep folder (default: out/sweeps/<spec name>)")
    p.add_argument("--backend", choices=["local", "ray"], default="local", help="where runs are computed")
    p.add_argument("--workers", type=whole_number(1), default=None,
                   help="worker processes / Ray CPUs (default: all cores)")
    p.add_argument("--address", default=None, help="Ray cluster to attach to (host:port, ray://host:port, auto)")
    p.add_argument("--retry-failed", action="store_true", help="recompute runs recorded as failed")
    p.add_argument("--plan-only", action="store_true", help="validate the spec and list its runs; write nothing")
    p.add_argument("--plan-folder", type=optional_output_folder, default=argparse.SUPPRESS, metavar="FOLDER|none",
                   help="folder of the on-disk plans the workers share (planner agents); several sweeps may "
                        "share one to plan each world once in all. Default: <out>/plans (with --backend ray "
                        "--address: none). 'none': no plans on disk, each worker plans in memory "
                        "(a folder named none: ./none)")
    p.add_argument("--keep-plans", action="store_true",
                   help="keep <out>/plans when the sweep finishes (by default it is removed; a resumed sweep "
                        "plans again what it needs, with the same results). A --plan-folder is always kept")
    p.add_argument("--plan-cap", type=positive_number, default=None, metavar="MB",
                   help="most megabytes (10^6 bytes) of the plan folder on disk, counting its lock files, "
                        "half-written and damaged plans: after writing a plan a worker removes those nobody "
                        "holds, then the least recently used plans (default: no cap)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_agent_options(p, "agent replacing the spec's agent list (repeatable)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Validate, run (or resume) and print the report; bad input exits 2 naming the fault."""
    from shortcut_gym.lab.sweep.plan import plan_runs
    from shortcut_gym.lab.sweep.runner import run_sweep
    from shortcut_gym.lab.sweep.spec import load_spec

    if args.address is not None and args.backend != "ray":
        raise SweepArgumentError("--address applies to --backend ray only")
    spec = load_spec(args.spec, agents=agent_specs_of(args) or None)
    if args.plan_only:
        runs = plan_runs(spec, args.spec)
        for r in runs:
            point = ", ".join(f"{k}={v}" for k, v in r["point"].items())
            print(f"{r['run_id']}  {r['label']:<28} {point}")
        print(f"{len(runs)} runs, {len(spec.seed_list())} simulated users each")
        return 0
    out = args.out or Path("out/sweeps") / spec.name
    plans: Path | bool | None = None  # None: run_sweep's default place
    if "plan_folder" in args:
        plans = False if args.plan_folder is None else args.plan_folder
    if args.keep_plans and plans is not None:
        raise SweepArgumentError("--keep-plans applies to the default <out>/plans only; a --plan-folder is always "
                                 "kept, and with --plan-folder none there are no plans on disk")
    if args.plan_cap is not None and plans is False:
        raise SweepArgumentError("--plan-cap caps plans on disk; --plan-folder none keeps none there")
    cap = None if args.plan_cap is None else max(1, round(args.plan_cap * 1e6))
    detail(f"sweep {spec.name} into {out} on backend {args.backend}")
    try:
        report = run_sweep(spec, out, backend=args.backend, workers=args.workers, address=args.address,
                           retry_failed=args.retry_failed, progress=not args.quiet, plan_store=plans,
                           keep_plans=args.keep_plans, plan_store_bytes=cap)
    except BackendError as err:
        raise SweepArgumentError(str(err)) from None
    failures = set(report.failure_lines())
    for line in report.lines():
        (warn if line in failures else status)(line)
    return 1 if report.failed else 0
