"""Constants of the trade, defined once."""

P0_PA = 20e-6  # reference sound pressure (ISO 1683), Pa
# A sum over fewer one-third-octave bands than this is not called an overall level.
MIN_OVERALL_BANDS = 3
