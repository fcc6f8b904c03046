"""The lab: trial logs, fitting, comparison, recovery, sweeps, reports, the CLI."""
