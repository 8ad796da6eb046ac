"""Tests of pacewire.wire: the formats in and out."""
