"""De-Dopplerization, source power integration, resolution; imaging methods in ``methods``."""
