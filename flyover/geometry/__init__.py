"""Frames (site ENU, body axes), the track model, emission windows and propagation paths."""
