// WGS84 geodetic -> Earth-centred and geocentric coordinates.

#include "models/geodesy.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <string>

namespace fluxtrim::models {
namespace {

constexpr double kPi = 3.14159265358979323846;
// Semi-minor axis b = a (1 - f) (NIMA TR8350.2 table 3.1 gives
// b = 6356752.3142 m, from memory).
constexpr double kSemiMinor_m =
    kWgs84SemiMajorAxis_m * (1.0 - 1.0 / kWgs84InverseFlattening);

TEST(GeodesyTest, SemiMinorAxisMatchesThePublishedValue) {
  // TR8350.2 table 3.1 prints b to 0.1 mm (from memory).
  EXPECT_NEAR(kSemiMinor_m, 6356752.3142, 1e-4);
}

TEST(GeodesyTest, EquatorAndPolesLieOnTheAxesOfTheEllipsoid) {
  constexpr double kTol_m = 1e-8;  // rounding of metre-scale products
  const EcefPoint eq = GeodeticToEcef(0.0, 0.0, 0.0);
  EXPECT_NEAR(eq.x_m, kWgs84SemiMajorAxis_m, kTol_m);
  EXPECT_NEAR(eq.y_m, 0.0, kTol_m);
  EXPECT_NEAR(eq.z_m, 0.0, kTol_m);
  const EcefPoint north = GeodeticToEcef(kPi / 2, 1.0, 1000.0);
  EXPECT_NEAR(north.z_m, kSemiMinor_m + 1000.0, kTol_m);
  const GeocentricPoint pole = GeodeticToGeocentric(-kPi / 2, 0.0);
  EXPECT_NEAR(pole.radius_m, kSemiMinor_m, kTol_m);
  EXPECT_NEAR(pole.sin_lat, -1.0, 1e-15);
  EXPECT_GE(pole.cos_lat, 0.0);
}

TEST(GeodesyTest, SurfacePointsSatisfyTheEllipsoidEquation) {
  // (p/a)^2 + (z/b)^2 = 1 on the surface (definition of the ellipsoid), and
  // the geocentric latitude is atan((1 - f)^2 tan(lat)) there (TR8350.2,
  // from memory).
  for (double lat_deg : {-80.0, -33.0, 12.5, 45.0, 71.0}) {
    const double lat = lat_deg * kPi / 180.0;
    const EcefPoint e = GeodeticToEcef(lat, 0.4, 0.0);
    const double p = std::hypot(e.x_m, e.y_m);
    const double lhs = std::pow(p / kWgs84SemiMajorAxis_m, 2) +
                       std::pow(e.z_m / kSemiMinor_m, 2);
    EXPECT_NEAR(lhs, 1.0, 1e-14);
    const GeocentricPoint g = GeodeticToGeocentric(lat, 0.0);
    const double one_minus_f = 1.0 - 1.0 / kWgs84InverseFlattening;
    EXPECT_NEAR(g.lat_rad, std::atan(one_minus_f * one_minus_f * std::tan(lat)),
                1e-14);
    EXPECT_NEAR(g.radius_m, std::hypot(p, e.z_m), 1e-8);
  }
}

TEST(GeodesyTest, HeightMovesThePointAlongTheEllipsoidNormal) {
  // The geodetic height is measured along the normal (cos lat cos lon,
  // cos lat sin lon, sin lat): by definition of geodetic coordinates.
  const double lat = 0.8, lon = -1.1;
  const EcefPoint a = GeodeticToEcef(lat, lon, 0.0);
  const EcefPoint b = GeodeticToEcef(lat, lon, 5000.0);
  constexpr double kTol_m = 1e-8;
  EXPECT_NEAR(b.x_m - a.x_m, 5000.0 * std::cos(lat) * std::cos(lon), kTol_m);
  EXPECT_NEAR(b.y_m - a.y_m, 5000.0 * std::cos(lat) * std::sin(lon), kTol_m);
  EXPECT_NEAR(b.z_m - a.z_m, 5000.0 * std::sin(lat), kTol_m);
}

}  // namespace
}  // namespace fluxtrim::models
