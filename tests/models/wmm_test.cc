// World Magnetic Model: published test values, coefficient-file reader,
// closed-form dipole, secular variation, poles, dates.

#include "models/wmm.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <sstream>
#include <stdexcept>
#include <string>
#include <vector>

#include "models/geodesy.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::models {
namespace {

// Requirement of the issue: X, Y, Z within 0.05 nT. The published values
// carry 1e-6 nT, so a correct implementation agrees far better (measured
// worst case is printed by the test); 0.05 nT is the acceptance limit.
constexpr double kComponentTol_nT = 0.05;
// Published I and D are rounded to 0.01 deg: a correct value lies within
// half a unit of the last digit (0.005 deg) of the published one; 1e-6 deg
// absorbs the binary representation of the printed decimals.
constexpr double kAngleRoundingTol_deg = 0.005 + 1e-6;

struct TestPoint {
  double year, height_km, lat_deg, lon_deg, x, y, z, h, f, incl_deg, decl_deg;
};

std::vector<TestPoint> ReadTestValues() {
  // Source: WMM2025 test values published with the model by NOAA NCEI and
  // BGS (provenance in tests/reference/README.md).
  std::ifstream in(std::string(FLUXTRIM_SOURCE_DIR) +
                   "/tests/reference/WMM2025_test_values.csv");
  std::vector<TestPoint> points;
  std::string line;
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    TestPoint p{};
    const int read =
        std::sscanf(line.c_str(), "%lf,%lf,%lf,%lf,%lf,%lf,%lf,%lf,%lf,%lf,%lf",
                    &p.year, &p.height_km, &p.lat_deg, &p.lon_deg, &p.x, &p.y,
                    &p.z, &p.h, &p.f, &p.incl_deg, &p.decl_deg);
    EXPECT_EQ(read, 11) << line;
    points.push_back(p);
  }
  return points;
}

double AngleDiffDeg(double a, double b) {
  double d = std::fmod(a - b, 360.0);
  if (d > 180.0) d -= 360.0;
  if (d < -180.0) d += 360.0;
  return d;
}

TEST(WmmTest, ReproducesAllHundredPublishedWmm2025TestValues) {
  const std::vector<TestPoint> points = ReadTestValues();
  ASSERT_EQ(points.size(), 100u);
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  double worst[7] = {0, 0, 0, 0, 0, 0, 0};  // X Y Z H F I D
  for (const TestPoint& p : points) {
    const GeomagneticField b =
        wmm.Field(p.lat_deg, p.lon_deg, p.height_km * 1000.0, p.year);
    const double err[7] = {b.x_nT - p.x,
                           b.y_nT - p.y,
                           b.z_nT - p.z,
                           b.h_nT - p.h,
                           b.f_nT - p.f,
                           b.incl_deg - p.incl_deg,
                           AngleDiffDeg(b.decl_deg, p.decl_deg)};
    for (int k = 0; k < 7; ++k)
      worst[k] = std::max(worst[k], std::fabs(err[k]));
    const std::string where =
        "at " + std::to_string(p.year) + " " + std::to_string(p.height_km) +
        " km " + std::to_string(p.lat_deg) + " " + std::to_string(p.lon_deg);
    EXPECT_NEAR(b.x_nT, p.x, kComponentTol_nT) << where;
    EXPECT_NEAR(b.y_nT, p.y, kComponentTol_nT) << where;
    EXPECT_NEAR(b.z_nT, p.z, kComponentTol_nT) << where;
    EXPECT_NEAR(b.h_nT, p.h, kComponentTol_nT) << where;
    EXPECT_NEAR(b.f_nT, p.f, kComponentTol_nT) << where;
    EXPECT_NEAR(b.incl_deg, p.incl_deg, kAngleRoundingTol_deg) << where;
    EXPECT_NEAR(err[6], 0.0, kAngleRoundingTol_deg) << where;
  }
  std::printf(
      "WMM2025 published test values, worst |error| over %zu points:\n"
      "  X %.2e nT, Y %.2e nT, Z %.2e nT, H %.2e nT, F %.2e nT,\n"
      "  I %.5f deg, D %.5f deg (published I, D rounded to 0.01 deg)\n",
      points.size(), worst[0], worst[1], worst[2], worst[3], worst[4], worst[5],
      worst[6]);
}

TEST(WmmTest, BuiltInModelIsWmm2025OfEpoch2025) {
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  EXPECT_EQ(wmm.epoch(), 2025.0);
  EXPECT_EQ(wmm.name(), "WMM-2025");
  EXPECT_EQ(wmm.max_degree(), 12);
}

TEST(WmmTest, ReadingTheCoefficientFileGivesTheBuiltInModel) {
  const std::string path =
      std::string(FLUXTRIM_SOURCE_DIR) + "/models/data/WMM2025.COF";
  const MagneticModel from_file = MagneticModel::FromCofFile(path);
  const GeomagneticField a = from_file.Field(-33.9, 18.4, 1500.0, 2027.3);
  const GeomagneticField b =
      MagneticModel::Wmm2025().Field(-33.9, 18.4, 1500.0, 2027.3);
  // Same text, same arithmetic: bitwise equal.
  EXPECT_EQ(a.x_nT, b.x_nT);
  EXPECT_EQ(a.y_nT, b.y_nT);
  EXPECT_EQ(a.z_nT, b.z_nT);
}

TEST(WmmTest, MissingCoefficientFileNamesThePath) {
  try {
    MagneticModel::FromCofFile("/nonexistent/dir/X.COF");
    FAIL() << "expected std::runtime_error";
  } catch (const std::runtime_error& e) {
    EXPECT_NE(std::string(e.what()).find("/nonexistent/dir/X.COF"),
              std::string::npos)
        << e.what();
  }
}

// A degree-1 model with only the axial dipole g10 (and optionally its
// secular variation).
std::string DipoleCof(double g10, double dg10) {
  char line[128];
  std::snprintf(line, sizeof line, "  1  0 %12.4f %9.1f %10.4f %9.1f\n", g10,
                0.0, dg10, 0.0);
  return std::string("    2025.0            TEST-DIPOLE     01/01/2025\n") +
         line + "  1  1        0.0       0.0        0.0       0.0\n" +
         "999999999999999999999999999999999999999999999999\n";
}

TEST(WmmTest, AxialDipoleMatchesClosedFormAtEquatorAndPole) {
  // Closed form of an axial dipole potential V = a (a/r)^2 g10 cos(theta):
  // X = -g10 (a/r)^3 sin(theta), Z = -2 g10 (a/r)^3 cos(theta)
  // (Merrill, McElhinny & McFadden, "The Magnetic Field of the Earth",
  // 1996, ch. 2; from memory). At r = a: equator X = -g10, pole Z = -2 g10.
  const double g10 = -30000.0;
  const MagneticModel dipole =
      MagneticModel::FromCofText(DipoleCof(g10, 0), "dipole");
  // Geodetic and geocentric latitude coincide at the equator and the poles;
  // choose the height that puts the point on the reference sphere.
  const double a_ref = MagneticModel::kReferenceRadius_m;
  const double b_wgs84 =
      kWgs84SemiMajorAxis_m * (1.0 - 1.0 / kWgs84InverseFlattening);
  // Rounding of a 5-term sum of 1e4-sized numbers: 1e-9 nT is ~1e-13
  // relative, ample for double precision.
  constexpr double kTol_nT = 1e-9;
  const GeomagneticField eq =
      dipole.Field(0.0, 40.0, a_ref - kWgs84SemiMajorAxis_m, 2025.0);
  EXPECT_NEAR(eq.x_nT, -g10, kTol_nT);
  EXPECT_NEAR(eq.y_nT, 0.0, kTol_nT);
  EXPECT_NEAR(eq.z_nT, 0.0, kTol_nT);
  const GeomagneticField north =
      dipole.Field(90.0, 0.0, a_ref - b_wgs84, 2025.0);
  EXPECT_NEAR(north.z_nT, -2.0 * g10, kTol_nT);
  EXPECT_NEAR(north.h_nT, 0.0, kTol_nT);
  const GeomagneticField south =
      dipole.Field(-90.0, 0.0, a_ref - b_wgs84, 2025.0);
  EXPECT_NEAR(south.z_nT, 2.0 * g10, kTol_nT);
  // Inverse-cube decay with radius (same source): at r = 2a, 1/8.
  const GeomagneticField far =
      dipole.Field(0.0, 40.0, 2.0 * a_ref - kWgs84SemiMajorAxis_m, 2025.0);
  EXPECT_NEAR(far.x_nT, -g10 / 8.0, kTol_nT);
}

TEST(WmmTest, SecularVariationIsLinearFromTheEpoch) {
  // g(t) = g + dg (t - epoch) (WMM2025 Technical Report, eq. 9, from
  // memory): a model with g10 = -30000, dg10 = +40 nT/yr at epoch + 2.5 yr
  // equals a static model with g10 = -29900.
  const MagneticModel moving =
      MagneticModel::FromCofText(DipoleCof(-30000.0, 40.0), "moving");
  const MagneticModel fixed =
      MagneticModel::FromCofText(DipoleCof(-29900.0, 0.0), "fixed");
  const GeomagneticField a = moving.Field(37.0, -122.0, 300.0, 2027.5);
  const GeomagneticField b = fixed.Field(37.0, -122.0, 300.0, 2027.5);
  constexpr double kTol_nT = 1e-9;  // double rounding, as above
  EXPECT_NEAR(a.x_nT, b.x_nT, kTol_nT);
  EXPECT_NEAR(a.z_nT, b.z_nT, kTol_nT);
  // And before the epoch, backwards.
  const GeomagneticField c = moving.Field(37.0, -122.0, 300.0, 2022.5);
  const GeomagneticField d =
      MagneticModel::FromCofText(DipoleCof(-30100.0, 0.0), "fixed2")
          .Field(37.0, -122.0, 300.0, 2022.5);
  EXPECT_NEAR(c.z_nT, d.z_nT, kTol_nT);
}

TEST(WmmTest, FieldAtTheGeographicPolesIsFiniteAndContinuous) {
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  for (double pole : {90.0, -90.0}) {
    for (double lon : {-150.0, 0.0, 33.0, 179.0}) {
      const GeomagneticField at = wmm.Field(pole, lon, 1000.0, 2026.0);
      // 1e-7 deg (1 cm) from the pole along the same meridian.
      const double near_lat = pole - std::copysign(1e-7, pole);
      const GeomagneticField near = wmm.Field(near_lat, lon, 1000.0, 2026.0);
      ASSERT_TRUE(std::isfinite(at.x_nT) && std::isfinite(at.y_nT) &&
                  std::isfinite(at.z_nT) && std::isfinite(at.decl_deg));
      // The field's gradient is at most ~10 nT/km at the surface (common
      // practice: main-field gradients are a few nT/km); over 1 cm that is
      // 1e-4 nT, so 1e-3 nT leaves room for rounding.
      constexpr double kContinuityTol_nT = 1e-3;
      EXPECT_NEAR(at.x_nT, near.x_nT, kContinuityTol_nT) << pole << " " << lon;
      EXPECT_NEAR(at.y_nT, near.y_nT, kContinuityTol_nT) << pole << " " << lon;
      EXPECT_NEAR(at.z_nT, near.z_nT, kContinuityTol_nT) << pole << " " << lon;
    }
  }
}

TEST(WmmTest, DeclinationAtThePoleTurnsWithTheLongitudeOfTheLocalMeridian) {
  // Geometry: at the north pole local north along meridian lon is the
  // horizontal direction (-cos lon, -sin lon) in Earth-fixed axes, so a fixed
  // horizontal field has D = lon - beta + 180 deg: D - lon is constant; at
  // the south pole north is (cos lon, sin lon) and D + lon is constant. H and
  // Z do not depend on the meridian.
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  constexpr double kTolDeg = 1e-9;  // angles of the same vector, rounding only
  constexpr double kTol_nT = 1e-8;
  const GeomagneticField n0 = wmm.Field(90.0, 0.0, 0.0, 2025.0);
  const GeomagneticField s0 = wmm.Field(-90.0, 0.0, 0.0, 2025.0);
  for (double lon : {-120.0, 45.0, 100.0}) {
    const GeomagneticField n = wmm.Field(90.0, lon, 0.0, 2025.0);
    const GeomagneticField s = wmm.Field(-90.0, lon, 0.0, 2025.0);
    EXPECT_NEAR(AngleDiffDeg(n.decl_deg - lon, n0.decl_deg), 0.0, kTolDeg);
    EXPECT_NEAR(AngleDiffDeg(s.decl_deg + lon, s0.decl_deg), 0.0, kTolDeg);
    EXPECT_NEAR(n.h_nT, n0.h_nT, kTol_nT);
    EXPECT_NEAR(n.z_nT, n0.z_nT, kTol_nT);
    EXPECT_NEAR(s.h_nT, s0.h_nT, kTol_nT);
  }
}

TEST(WmmTest, LongitudesDifferingByAFullTurnGiveTheSameField) {
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  const GeomagneticField a = wmm.Field(51.5, -0.1, 100.0, 2025.9);
  const GeomagneticField b = wmm.Field(51.5, 359.9, 100.0, 2025.9);
  constexpr double kTol_nT = 1e-7;  // cos/sin of 360 deg shifted angles
  EXPECT_NEAR(a.x_nT, b.x_nT, kTol_nT);
  EXPECT_NEAR(a.y_nT, b.y_nT, kTol_nT);
  EXPECT_NEAR(a.z_nT, b.z_nT, kTol_nT);
}

TEST(WmmTest, RatesAreTheTimeDerivativesOfTheElements) {
  // Reference: the definition of the derivative applied to Field() (tested
  // above against the published values). X, Y, Z are linear in time, so
  // their one-year difference is exact up to rounding; H, F, I, D are
  // smooth, so a central difference with dt = 1e-3 yr has a truncation error
  // ~ dt^2 |third derivative| that is negligible against the tolerances.
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  struct Point {
    double lat_deg, lon_deg, alt_m;
  };
  for (const Point& p :
       {Point{48.1, 11.6, 500.0}, Point{-33.9, 151.2, 0.0},
        Point{78.2, 15.6, 3000.0}, Point{-89.0, 10.0, 10000.0}}) {
    const double t = 2026.4;
    const GeomagneticFieldWithRate fr =
        wmm.FieldWithRate(p.lat_deg, p.lon_deg, p.alt_m, t);
    const GeomagneticField f = wmm.Field(p.lat_deg, p.lon_deg, p.alt_m, t);
    EXPECT_EQ(fr.field.x_nT, f.x_nT);
    EXPECT_EQ(fr.field.decl_deg, f.decl_deg);
    const GeomagneticField a =
        wmm.Field(p.lat_deg, p.lon_deg, p.alt_m, t + 1.0);
    constexpr double kLinearTol_nT = 1e-8;  // rounding of 5e4-sized sums
    EXPECT_NEAR(fr.per_year.x_nT, a.x_nT - f.x_nT, kLinearTol_nT);
    EXPECT_NEAR(fr.per_year.y_nT, a.y_nT - f.y_nT, kLinearTol_nT);
    EXPECT_NEAR(fr.per_year.z_nT, a.z_nT - f.z_nT, kLinearTol_nT);
    constexpr double kDt = 1e-3;
    const GeomagneticField plus =
        wmm.Field(p.lat_deg, p.lon_deg, p.alt_m, t + kDt);
    const GeomagneticField minus =
        wmm.Field(p.lat_deg, p.lon_deg, p.alt_m, t - kDt);
    // Rounding of 5e4 nT values over 2e-3 yr: ~1e-11 / 2e-3 = 5e-9 nT/yr.
    constexpr double kRateTol_nT = 1e-6;
    constexpr double kRateTolDeg = 1e-8;
    EXPECT_NEAR(fr.per_year.h_nT, (plus.h_nT - minus.h_nT) / (2 * kDt),
                kRateTol_nT);
    EXPECT_NEAR(fr.per_year.f_nT, (plus.f_nT - minus.f_nT) / (2 * kDt),
                kRateTol_nT);
    EXPECT_NEAR(fr.per_year.incl_deg,
                (plus.incl_deg - minus.incl_deg) / (2 * kDt), kRateTolDeg);
    EXPECT_NEAR(fr.per_year.decl_deg,
                AngleDiffDeg(plus.decl_deg, minus.decl_deg) / (2 * kDt),
                kRateTolDeg);
  }
}

TEST(WmmTest, HorizontalFieldNearTheNorthMagneticPoleIsInTheBlackoutZone) {
  // WMM2025 places the north dip pole near 85.8 N, 139.3 W in 2025 (WMM2025
  // Technical Report, from memory); the blackout zone (H < 2000 nT)
  // surrounds it. Mid-latitudes are far outside the caution zone.
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  const GeomagneticField pole = wmm.Field(85.8, -139.3, 0.0, 2025.0);
  EXPECT_EQ(ClassifyCompassZone(pole.h_nT), CompassZone::kBlackout)
      << pole.h_nT;
  const GeomagneticField paris = wmm.Field(48.9, 2.3, 0.0, 2025.0);
  EXPECT_EQ(ClassifyCompassZone(paris.h_nT), CompassZone::kNormal);
  EXPECT_EQ(ClassifyCompassZone(kWmmCautionH_nT - 1), CompassZone::kCaution);
  EXPECT_EQ(ClassifyCompassZone(kWmmBlackoutH_nT - 1), CompassZone::kBlackout);
}

TEST(WmmTest, FieldRejectsNonFiniteArgumentsAndLatitudeBeyondThePoles) {
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  const double nan = std::numeric_limits<double>::quiet_NaN();
  EXPECT_THROW(wmm.Field(nan, 0, 0, 2025.0), std::invalid_argument);
  EXPECT_THROW(wmm.Field(0, nan, 0, 2025.0), std::invalid_argument);
  EXPECT_THROW(wmm.Field(0, 0, nan, 2025.0), std::invalid_argument);
  EXPECT_THROW(wmm.Field(0, 0, 0, nan), std::invalid_argument);
  EXPECT_THROW(wmm.Field(90.0001, 0, 0, 2025.0), std::invalid_argument);
  EXPECT_THROW(wmm.Field(-91, 0, 0, 2025.0), std::invalid_argument);
  EXPECT_THROW(wmm.Field(0, 0, -7e6, 2025.0), std::invalid_argument);
}

TEST(WmmTest, ValidDatesAreTheFiveYearsFromTheEpoch) {
  const MagneticModel& wmm = MagneticModel::Wmm2025();
  EXPECT_TRUE(wmm.IsValidDate(2025.0));
  EXPECT_TRUE(wmm.IsValidDate(2029.999));
  EXPECT_FALSE(wmm.IsValidDate(2030.0));
  EXPECT_FALSE(wmm.IsValidDate(2024.999));
  EXPECT_FALSE(wmm.IsValidDate(std::numeric_limits<double>::quiet_NaN()));
}

// ---- coefficient-file errors -------------------------------------------

// Expects FromCofText to throw a message naming "source:line" and "expected".
void ExpectCofError(const std::string& text, int line,
                    const std::string& also_contains) {
  try {
    MagneticModel::FromCofText(text, "bad.COF");
    ADD_FAILURE() << "no error for:\n" << text;
  } catch (const std::runtime_error& e) {
    const std::string message = e.what();
    EXPECT_NE(message.find("bad.COF:" + std::to_string(line) + ":"),
              std::string::npos)
        << message;
    EXPECT_NE(message.find("expected"), std::string::npos) << message;
    EXPECT_NE(message.find(also_contains), std::string::npos) << message;
  }
}

const char kHeader[] = "    2025.0            WMM-2025        11/13/2024\n";
const char k10[] = "  1  0   -29351.8       0.0       12.0       0.0\n";
const char k11[] = "  1  1    -1410.8    4545.4        9.7     -21.5\n";
const char kNines[] = "999999999999999999999999999999999999999999999999\n";

TEST(WmmCofReaderTest, AcceptsAMinimalDegreeOneFile) {
  const MagneticModel m = MagneticModel::FromCofText(
      std::string(kHeader) + k10 + k11 + kNines, "ok.COF");
  EXPECT_EQ(m.max_degree(), 1);
  EXPECT_EQ(m.release_date(), "11/13/2024");
}

TEST(WmmCofReaderTest, AcceptsWindowsLineEndingsAndBlankLines) {
  const MagneticModel m = MagneticModel::FromCofText(
      "    2025.0  WMM-2025  11/13/2024\r\n\r\n  1  0  -29351.8  0.0  12.0  "
      "0.0\r\n  1  1 -1410.8 4545.4 9.7 -21.5\r\n99999999\r\n",
      "crlf.COF");
  EXPECT_EQ(m.max_degree(), 1);
}

TEST(WmmCofReaderTest, EmptyFileIsRejected) {
  ExpectCofError("", 1, "header");
  ExpectCofError("\n  \n", 3, "empty");
}

TEST(WmmCofReaderTest, BadHeaderIsRejected) {
  ExpectCofError("WMM-2025 11/13/2024\n", 1, "header");
  ExpectCofError("year2025 WMM-2025 11/13/2024\n", 1, "epoch");
}

TEST(WmmCofReaderTest, BadNumberNamesTheColumn) {
  ExpectCofError(std::string(kHeader) +
                     "  1  0   -29351.8       0.0       1x2.0       0.0\n" +
                     k11 + kNines,
                 2, "dg (nT/yr)");
  ExpectCofError(std::string(kHeader) + k10 +
                     "  1  1    -1410.8    nan        9.7     -21.5\n" + kNines,
                 3, "h (nT)");
  ExpectCofError(std::string(kHeader) + k10 + "  1  1.5 0 0 0 0\n" + kNines, 3,
                 "order m");
}

TEST(WmmCofReaderTest, WrongFieldCountIsRejected) {
  ExpectCofError(
      std::string(kHeader) + k10 + "  1  1  -1410.8  4545.4  9.7\n" + kNines, 3,
      "6 fields");
}

TEST(WmmCofReaderTest, MissingTerminatorIsRejected) {
  ExpectCofError(std::string(kHeader) + k10 + k11, 4, "terminator");
  ExpectCofError(std::string(kHeader), 2, "terminator");
}

TEST(WmmCofReaderTest, DegreeOutOfOrderIsRejected) {
  ExpectCofError(std::string(kHeader) + k11 + k10 + kNines, 2, "(1 0)");
  ExpectCofError(
      std::string(kHeader) + k10 + k11 + "  3  0   1.0 0.0 0.0 0.0\n" + kNines,
      4, "(2 0)");
  ExpectCofError(std::string(kHeader) + k10 + k10 + kNines, 3, "(1 1)");
}

TEST(WmmCofReaderTest, IncompleteDegreeAndEmptyModelAreRejected) {
  ExpectCofError(std::string(kHeader) + k10 + kNines, 3, "incomplete");
  ExpectCofError(std::string(kHeader) + kNines, 2, "degree 1");
}

// ---- dates ---------------------------------------------------------------

// Day of year and year length from Python's datetime module (outside
// source), queried through FLUXTRIM_PYTHON for each date.
std::vector<double> PythonDecimalYears(const std::vector<std::string>& dates) {
  std::string script =
      "import datetime,sys\n"
      "for s in sys.argv[1:]:\n"
      "  d=datetime.datetime.fromisoformat(s)\n"
      "  y0=datetime.datetime(d.year,1,1); y1=datetime.datetime(d.year+1,1,1)\n"
      "  print(repr(d.year+(d-y0).total_seconds()/(y1-y0).total_seconds()))\n";
  std::string command = std::string(FLUXTRIM_PYTHON) + " -c '" + script + "'";
  for (const std::string& d : dates) command += " '" + d + "'";
  std::istringstream in(test_support::RunCommand(command).output);
  std::vector<double> out;
  double value = 0;
  while (in >> value) out.push_back(value);
  return out;
}

TEST(WmmDateTest, CalendarDatesMatchPythonDatetimeIncludingLeapYears) {
  const std::vector<std::string> dates = {
      "2025-01-01", "2025-06-30",          "2025-12-31",
      "2024-02-29", "2024-03-01",          "2024-12-31",
      "2000-02-29", "2000-12-31",          "1900-12-31",
      "2100-03-01", "2025-07-02T12:00:00", "2028-02-29T23:59:59.5"};
  const std::vector<double> expected = PythonDecimalYears(dates);
  ASSERT_EQ(expected.size(), dates.size()) << "python datetime query failed";
  // Both compute year + seconds / seconds-in-year in double: 1e-12 yr
  // (30 microseconds) is far below any use and above rounding.
  constexpr double kTolYear = 1e-12;
  for (std::size_t i = 0; i < dates.size(); ++i) {
    EXPECT_NEAR(ParseDecimalYear(dates[i]), expected[i], kTolYear) << dates[i];
  }
  // The same instant with a UTC suffix.
  EXPECT_EQ(ParseDecimalYear("2025-07-02T12:00:00Z"),
            ParseDecimalYear("2025-07-02T12:00:00"));
}

TEST(WmmDateTest, DecimalYearsPassThrough) {
  EXPECT_EQ(ParseDecimalYear("2025.5"), 2025.5);
  EXPECT_EQ(ParseDecimalYear(" 2027 "), 2027.0);
  EXPECT_EQ(ParseDecimalYear("2026.25"), 2026.25);
}

TEST(WmmDateTest, BadTextIsRejectedAndNamed) {
  for (const char* text :
       {"", "abc", "2025.5x", "nan", "inf", "2025-13-01", "2025-00-10",
        "2025-06-31", "2025-02-29", "1900-02-29", "2025-6-30", "2025-06-30T",
        "2025-06-30T25:00", "2025-06-30T12:60", "2025-06-30 12:00:xx",
        "2025-06-30junk", "--2025"}) {
    try {
      ParseDecimalYear(text);
      ADD_FAILURE() << "accepted '" << text << "'";
    } catch (const std::invalid_argument& e) {
      EXPECT_NE(std::string(e.what()).find("'" + std::string(text) + "'"),
                std::string::npos)
          << e.what();
    }
  }
}

}  // namespace
}  // namespace fluxtrim::models
