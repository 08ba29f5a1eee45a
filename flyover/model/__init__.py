"""The campaign as plain data, the one error type for bad input, constants defined once, and
the time base (absolute times and recording clocks) every layer stands on."""
