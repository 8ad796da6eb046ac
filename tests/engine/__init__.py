"""Tests of pacewire.engine, the functional core."""
