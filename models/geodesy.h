#pragma once
// WGS84 ellipsoid: geodetic position -> Earth-centred Cartesian and
// geocentric spherical coordinates (NIMA TR8350.2, "Department of Defense
// World Geodetic System 1984", 3rd ed., eqs. 4-14 and table 3.1; the same
// conversion the WMM2025 Technical Report uses; both from memory).

namespace fluxtrim::models {

inline constexpr double kWgs84SemiMajorAxis_m = 6378137.0;
inline constexpr double kWgs84InverseFlattening = 298.257223563;

// Earth-centred, Earth-fixed Cartesian position (metres): x towards
// (lat 0, lon 0), z towards the north pole, y completes a right-handed frame.
struct EcefPoint {
  double x_m = 0;
  double y_m = 0;
  double z_m = 0;
};

// Geocentric spherical position. Latitude is geocentric (angle from the
// equatorial plane seen from the Earth's centre), carried as sine and cosine
// so that the poles stay exact (cos_lat >= 0).
struct GeocentricPoint {
  double radius_m = 0;
  double sin_lat = 0;
  double cos_lat = 1;
  double lat_rad = 0;  // atan2(sin_lat, cos_lat)
};

// lat_rad, lon_rad: geodetic latitude and longitude (radians, north and east
// positive); height_m: height above the ellipsoid (metres).
EcefPoint GeodeticToEcef(double lat_rad, double lon_rad, double height_m);

// Longitude is unchanged by the conversion, so it is not an argument.
GeocentricPoint GeodeticToGeocentric(double lat_rad, double height_m);

}  // namespace fluxtrim::models
