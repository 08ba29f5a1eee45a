"""Simulated scenarios and the writer of a whole simulated campaign (the demo)."""
