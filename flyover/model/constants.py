"""Constants of the trade, defined once."""

P0_PA = 20e-6  # reference sound pressure (ISO 1683), Pa
