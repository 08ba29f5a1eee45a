"""Constants of the trade, defined once."""

P0_PA = 20e-6  # reference sound pressure (ISO 1683), Pa
# A sum over fewer one-third-octave bands than this is not called an overall level.
MIN_OVERALL_BANDS = 3
# Imaging methods' tunables, their defaults (analysis.method_tuning sets them per campaign):
# functional beamforming's exponent nu, CLEAN-SC's loop gain and its iterations per line.
FUNCTIONAL_EXPONENT = 8.0
CLEAN_LOOP_GAIN = 0.3
CLEAN_MAX_SOURCES = 200

# The region name of all regions together (levels, tables and figures): a word of the results'
# vocabulary, kept here so that stages reading results need not load the imaging engine.
TOTAL = "total"
