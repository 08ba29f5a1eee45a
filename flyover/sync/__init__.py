"""Time from the recordings: timing channels, clock-offset estimation, the acoustic track check,
data-quality checks of channels and tracks (the clocks themselves: flyover.model.timebase)."""
