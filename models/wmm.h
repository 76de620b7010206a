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
  double x_nT = 0;  // north
  double y_nT = 0;  // east
  double z_nT = 0;  // down (positive down)
  double h_nT = 0;  // horizontal intensity
  double f_nT = 0;  // total intensity
  double incl_deg = 0;  // inclination, positive down
  double decl_deg = 0;  // declination, positive east of true north
};

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
  // g, h, dg, dh indexed [n * (n + 1) / 2 + m].
  std::vector<double> g_, h_, dg_, dh_;
};

// "2025-06-30" or "2025.5" -> decimal year (days of the year counted from
// Jan 1, divided by the year's length, as the WMM software does). Throws
// std::invalid_argument naming the text.
double ParseDecimalYear(const std::string& text);

}  // namespace fluxtrim::models
