"""``region_angles.csv``: per analysed window and region, the angles its sound leaves at."""

from flyover.io.results import TableFile

REGION_ANGLES = TableFile("region_angles.csv", (
    ("window", "index"),
    ("region", "region name, or 'total' (from the body origin)"),
    ("emission_polar_deg", "deg, body axes, from the region's centre to the array centre: "
                           "0 ahead, 90 abeam"),
    ("emission_azimuth_deg", "deg about the body x axis from straight down, + to starboard"),
    ("air_polar_deg", "deg in the moving air, between the velocity through the air and the "
                      "sound's direction"),
    ("mach_r", "M_r, the velocity through the air along the sound's direction over c"),
), float_format="%.9g")
