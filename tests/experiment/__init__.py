"""Tests of experiments: designs, seeds, executors, the batch store, comparisons."""
