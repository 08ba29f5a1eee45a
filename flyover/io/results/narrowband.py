"""``narrowband.csv``: per analysed window and region, the narrowband power spectral density of
the array focused on the region's centre, in source time (:mod:`flyover.acoustics.narrowband`)."""

from flyover.io.results import FigureFile, TableFile

NARROWBAND = TableFile("narrowband.csv", (
    ("window", "index"),
    ("polar_angle_deg", "deg, the window's angle"),
    ("region", "region name"),
    ("frequency_hz", "Hz, source time"),
    ("psd_db", "dB re (20 uPa)^2/Hz at 1 m, diagonal removed (the microphones' own noise "
               "taken out); empty where nothing is left above it"),
    ("psd_full_db", "dB re (20 uPa)^2/Hz at 1 m, every term kept"),
    ("resolution_hz", "Hz, line spacing: Hann segments of 1 / resolution_hz s, half overlap "
                      "(Welch), absorption of each microphone's path undone per line"),
), float_format="%.3f")
NARROWBAND_FIGURE = FigureFile("narrowband.png", "narrowband spectra of each region in the "
                                                 "window nearest overhead, blade-passing "
                                                 "harmonics marked")
