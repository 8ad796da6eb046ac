"""pacewire's tests: one folder per package of pacewire, shared helpers in tests.support."""
