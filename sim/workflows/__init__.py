"""Workflows layer: what the commands do, as functions (rates report, run with --check,
compare, sweep, demo, new template); `sim.cli` only parses arguments and prints."""
