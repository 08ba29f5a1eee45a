"""The quality-check figures of a pass: the track over the array and the spectrograms."""

from flyover.io.results import FigureFile

TRACK_FIGURE = FigureFile("qc_track.png", "track over the array")
SPECTROGRAM_FIGURE = FigureFile("qc_spectrogram.png", "spectrograms")
