"""Atmosphere, bands and weightings, reference corrections, statistics, calibration."""
