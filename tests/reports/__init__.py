"""Tests of pacewire.reports: reports and alerts."""
