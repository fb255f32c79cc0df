"""Tests that attack the running system: access, bad input, load, faults, schema fuzzing."""
