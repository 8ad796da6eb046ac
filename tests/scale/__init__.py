"""Tests of pacewire.scale: the service as Redis roles."""
