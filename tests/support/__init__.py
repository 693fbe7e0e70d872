"""Helpers shared by test modules and benchmarks; test modules import from here, never from
each other."""
