"""Tests of the bench page (pacewire/web) in a real browser."""
