"""Experiments: single runs, designs, seeds, executors and the run store."""
