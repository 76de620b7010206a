#include "models/geodesy.h"

#include <cmath>

namespace fluxtrim::models {
namespace {

constexpr double kFlattening = 1.0 / kWgs84InverseFlattening;
constexpr double kE2 =
    kFlattening * (2.0 - kFlattening);  // first eccentricity^2

// Meridian-plane coordinates: p (distance from the axis) and z.
void MeridianPlane(double lat_rad, double height_m, double* p, double* z) {
  const double sin_lat = std::sin(lat_rad);
  const double cos_lat = std::cos(lat_rad);
  // Prime-vertical radius of curvature N (TR8350.2 eq. 4-15).
  const double n =
      kWgs84SemiMajorAxis_m / std::sqrt(1.0 - kE2 * sin_lat * sin_lat);
  *p = (n + height_m) * cos_lat;
  *z = (n * (1.0 - kE2) + height_m) * sin_lat;
}

}  // namespace

EcefPoint GeodeticToEcef(double lat_rad, double lon_rad, double height_m) {
  double p = 0, z = 0;
  MeridianPlane(lat_rad, height_m, &p, &z);
  return {p * std::cos(lon_rad), p * std::sin(lon_rad), z};
}

GeocentricPoint GeodeticToGeocentric(double lat_rad, double height_m) {
  double p = 0, z = 0;
  MeridianPlane(lat_rad, height_m, &p, &z);
  GeocentricPoint out;
  out.radius_m = std::hypot(p, z);
  // cos(pi/2) is 6e-17, not 0: p is tiny but non-negative at the poles,
  // which the Legendre quotient P/sin handles exactly.
  out.cos_lat = std::fabs(p) / out.radius_m;
  out.sin_lat = z / out.radius_m;
  out.lat_rad = std::atan2(z, std::fabs(p));
  return out;
}

}  // namespace fluxtrim::models
