"""Time: recording clocks, clock-offset estimation, data-quality checks of channels and tracks."""
