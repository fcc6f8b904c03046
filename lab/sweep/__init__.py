"""Sweeps: spec, design, plan, per-run worker, driver, backends, durable store, outputs and plots."""
