"""Tests of pacewire.live: the single process, end to end."""
