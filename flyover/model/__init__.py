"""The campaign as plain data, the one error type for bad input, and constants defined once."""
