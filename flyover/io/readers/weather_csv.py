"""Weather-station CSV: UTC time, temperature, humidity, pressure and wind, one row a sample."""

from __future__ import annotations

import numpy as np

from flyover.acoustics.weather import WeatherSamples
from flyover.io.csvtable import numeric_column, read_csv_table
from flyover.io.readers import Reader, register
from flyover.io.timestamps import parse_utc_ns_array
from flyover.model.errors import FlyoverInputError

REQUIRED = ["time_utc", "temperature_c", "relative_humidity_pct", "wind_speed_m_s",
            "wind_from_deg"]


def read_weather(path) -> WeatherSamples:
    """Read a weather file: columns ``time_utc`` (ISO 8601 with a zone), ``temperature_c``,
    ``relative_humidity_pct``, ``wind_speed_m_s``, ``wind_from_deg`` (blowing from, clockwise
    from true north), optionally ``pressure_kpa`` and ``sensor_height_m``; rows in time order."""
    df = read_csv_table(path, "weather")
    missing = [c for c in REQUIRED if c not in df.columns]
    if missing:
        raise FlyoverInputError(f"weather file lacks columns {missing}", str(path),
                                ",".join(REQUIRED) + "[,pressure_kpa][,sensor_height_m]",
                                ",".join(df.columns))
    utc = parse_utc_ns_array(df["time_utc"], str(path), first_row=2)
    bad = np.flatnonzero(np.diff(utc) <= 0)
    if bad.size:
        raise FlyoverInputError(f"time at data row {bad[0] + 2} is not after the row before",
                                str(path), "strictly increasing times")
    height = (float(numeric_column(df, "sensor_height_m", path)[0])
              if "sensor_height_m" in df.columns else None)
    return WeatherSamples(
        utc, numeric_column(df, "temperature_c", path),
        numeric_column(df, "relative_humidity_pct", path),
        numeric_column(df, "pressure_kpa", path) if "pressure_kpa" in df.columns else None,
        numeric_column(df, "wind_speed_m_s", path), numeric_column(df, "wind_from_deg", path),
        height)


register(Reader("weather", "weather CSV", (".csv", ".txt"), read_weather))
