#pragma once
// World Magnetic Model: spherical-harmonic synthesis of the main field with
// secular variation (coefficient files in NOAA's published layout).
// Implementation: models/wmm.cc (Legendre recursion in models/legendre.*).

#include <string>
#include <vector>

#include "models/legendre.h"

namespace fluxtrim::models {

// Main field at a point, geodetic north/east/down frame.
struct GeomagneticField {
  double x_nT = 0;      // north
  double y_nT = 0;      // east
  double z_nT = 0;      // down (positive down)
  double h_nT = 0;      // horizontal intensity
  double f_nT = 0;      // total intensity
  double incl_deg = 0;  // inclination, positive down
  double decl_deg = 0;  // declination, positive east of true north
};

// The field and its annual rate of change (secular variation).
struct GeomagneticFieldWithRate {
  GeomagneticField field;
  // Rates per year, same members: x_nT..f_nT in nT/yr, incl_deg and
  // decl_deg in deg/yr.
  GeomagneticField per_year;
};

// Limits of the WMM's stated domain (WMM2025 Technical Report, NOAA NCEI /
// BGS, sections on validity and on compass use near the magnetic poles;
// from memory). Outside them the model still computes.
// Heights above the WGS84 ellipsoid for which the model is specified.
inline constexpr double kWmmMinAlt_m = -1000.0;
inline constexpr double kWmmMaxAlt_m = 850000.0;
// Where the horizontal intensity is below 2000 nT a magnetic compass is
// unreliable ("blackout zone"); below 6000 nT declination errors grow
// ("caution zone").
inline constexpr double kWmmBlackoutH_nT = 2000.0;
inline constexpr double kWmmCautionH_nT = 6000.0;
enum class CompassZone { kNormal, kCaution, kBlackout };
CompassZone ClassifyCompassZone(double h_nT);

class MagneticModel {
 public:
  // The WMM2025 model compiled into the library (models/data/WMM2025.COF).
  static const MagneticModel& Wmm2025();
  // Parses a coefficient file's text (header line "epoch name date", then
  // "n m g h dg dh" lines, ended by a line of 9s). source names the file in
  // error messages. Throws io-independent std::runtime_error naming source,
  // line and what was expected.
  static MagneticModel FromCofText(const std::string& text,
                                   const std::string& source);
  static MagneticModel FromCofFile(const std::string& path);

  // lat_deg, lon_deg: WGS84 geodetic latitude and longitude (degrees);
  // alt_m: height above the WGS84 ellipsoid (metres); decimal_year: e.g.
  // 2025.5. Dates outside [epoch, epoch + 5) are still computed: check
  // IsValidDate to warn. Exact at the geographic poles (declination there
  // follows the longitude given). Throws std::invalid_argument for a
  // non-finite argument, |lat_deg| > 90, or a point at or below the Earth's
  // centre. Thread-safe; does not allocate for degree <= 12.
  GeomagneticField Field(double lat_deg, double lon_deg, double alt_m,
                         double decimal_year) const;
  // Field() and the annual rates of every element in one pass: X, Y, Z
  // rates are the synthesis of dg, dh; H, F, I, D rates follow by the chain
  // rule (WMM2025 Technical Report, eq. 19, from memory). Same arguments,
  // frame and errors as Field(). The rate of D is undefined where H = 0
  // (returned as 0 there).
  GeomagneticFieldWithRate FieldWithRate(double lat_deg, double lon_deg,
                                         double alt_m,
                                         double decimal_year) const;
  bool IsValidDate(double decimal_year) const;

  double epoch() const { return epoch_; }
  const std::string& name() const { return name_; }
  // Third field of the header line as written (e.g. "11/13/2024").
  const std::string& release_date() const { return release_date_; }
  int max_degree() const { return max_degree_; }

  // Reference radius of the spherical-harmonic expansion (WMM: 6371.2 km).
  static constexpr double kReferenceRadius_m = 6371200.0;

 private:
  double epoch_ = 0;
  std::string name_;
  std::string release_date_;
  int max_degree_ = 0;
  SchmidtLegendre legendre_;

  // Geodetic north/east/down X, Y, Z into xyz[3]; with rate != nullptr also
  // their rates per year into rate[3].
  void Synthesize(double lat_deg, double lon_deg, double alt_m,
                  double decimal_year, double* xyz, double* rate) const;
  // g, h, dg, dh indexed [n * (n + 1) / 2 + m].
  std::vector<double> g_, h_, dg_, dh_;
};

// "2025-06-30" or "2025.5" -> decimal year (days of the year counted from
// Jan 1, divided by the year's length, as the WMM software does). Throws
// std::invalid_argument naming the text.
double ParseDecimalYear(const std::string& text);

}  // namespace fluxtrim::models
