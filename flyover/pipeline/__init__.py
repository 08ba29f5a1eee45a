"""Thin entry points, one per workflow step: load inputs, call the core, write outputs."""
