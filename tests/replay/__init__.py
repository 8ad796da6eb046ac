"""Tests of pacewire.replay: replay, import and the synthetic match."""
