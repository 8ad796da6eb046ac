"""Tests of pacewire.store: match history and baselines."""
