// World Magnetic Model synthesis. Method: WMM2025 Technical Report (NOAA NCEI
// and BGS, December 2024), sections 1.2-1.4 (from memory): time-adjusted
// Gauss coefficients, geodetic -> geocentric position, spherical-harmonic sum
// of the field in the geocentric spherical frame, rotation back to the
// geodetic north/east/down frame, then H, F, I, D.

#include "models/wmm.h"

#include <array>
#include <cctype>
#include <charconv>
#include <cmath>
#include <fstream>
#include <sstream>
#include <stdexcept>
#include <string_view>

#include "models/geodesy.h"

namespace fluxtrim::models {

extern const char* const kWmm2025Cof;

namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kDegToRad = kPi / 180.0;
constexpr double kRadToDeg = 180.0 / kPi;
// Degree up to which Field() works on stack buffers.
constexpr int kStackDegree = 16;
constexpr int kStackSize = (kStackDegree + 1) * (kStackDegree + 2) / 2;
// A file of a real model stays far below this; it bounds memory on garbage.
constexpr int kMaxDegree = 2000;

std::vector<std::string_view> SplitWhitespace(std::string_view line) {
  std::vector<std::string_view> tokens;
  std::size_t i = 0;
  while (i < line.size()) {
    while (i < line.size() && std::isspace(static_cast<unsigned char>(line[i])))
      ++i;
    std::size_t j = i;
    while (j < line.size() &&
           !std::isspace(static_cast<unsigned char>(line[j])))
      ++j;
    if (j > i) tokens.push_back(line.substr(i, j - i));
    i = j;
  }
  return tokens;
}

bool ParseDouble(std::string_view token, double* value) {
  if (!token.empty() && token.front() == '+') token.remove_prefix(1);
  const char* end = token.data() + token.size();
  const auto result = std::from_chars(token.data(), end, *value);
  return result.ec == std::errc() && result.ptr == end && std::isfinite(*value);
}

bool ParseInt(std::string_view token, int* value) {
  const char* end = token.data() + token.size();
  const auto result = std::from_chars(token.data(), end, *value);
  return result.ec == std::errc() && result.ptr == end;
}

// "SOURCE:LINE: expected WHAT" (+ ", found 'TOKEN'").
[[noreturn]] void Fail(const std::string& source, int line,
                       const std::string& expected,
                       std::string_view found = {}) {
  std::string message =
      source + ":" + std::to_string(line) + ": expected " + expected;
  if (!found.empty()) message += ", found '" + std::string(found) + "'";
  throw std::runtime_error(message);
}

bool IsTerminator(std::string_view line) {
  const auto tokens = SplitWhitespace(line);
  if (tokens.size() != 1 || tokens[0].size() < 4) return false;
  return tokens[0].find_first_not_of('9') == std::string_view::npos;
}

bool IsLeapYear(int year) {
  return (year % 4 == 0 && year % 100 != 0) || year % 400 == 0;
}

}  // namespace

MagneticModel MagneticModel::FromCofText(const std::string& text,
                                         const std::string& source) {
  MagneticModel model;
  std::vector<double> g, h, dg, dh;
  std::istringstream in(text);
  std::string raw;
  int line_no = 0;
  bool have_header = false;
  bool terminated = false;
  int expect_n = 1, expect_m = 0;
  while (std::getline(in, raw)) {
    ++line_no;
    std::string_view line(raw);
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    const auto tokens = SplitWhitespace(line);
    if (tokens.empty()) continue;  // blank lines carry nothing
    if (!have_header) {
      if (tokens.size() != 3) {
        Fail(source, line_no,
             "header line 'EPOCH MODEL-NAME RELEASE-DATE' (3 fields, e.g. "
             "'2025.0 WMM-2025 11/13/2024')",
             line);
      }
      if (!ParseDouble(tokens[0], &model.epoch_)) {
        Fail(source, line_no, "the epoch as a decimal year in the header",
             tokens[0]);
      }
      model.name_ = std::string(tokens[1]);
      model.release_date_ = std::string(tokens[2]);
      have_header = true;
      continue;
    }
    if (IsTerminator(line)) {
      terminated = true;
      break;
    }
    if (tokens.size() != 6) {
      Fail(source, line_no,
           "a coefficient line 'n m g h dg dh' (6 fields) or a terminator "
           "line of 9s",
           line);
    }
    int n = 0, m = 0;
    if (!ParseInt(tokens[0], &n))
      Fail(source, line_no, "degree n as an integer", tokens[0]);
    if (!ParseInt(tokens[1], &m))
      Fail(source, line_no, "order m as an integer", tokens[1]);
    if (n != expect_n || m != expect_m) {
      Fail(source, line_no,
           "degree and order (n m) = (" + std::to_string(expect_n) + " " +
               std::to_string(expect_m) +
               ") next: lines are ordered by n, then m = 0..n",
           std::string(tokens[0]) + " " + std::string(tokens[1]));
    }
    static const char* const kColumn[] = {"",       "",           "g (nT)",
                                          "h (nT)", "dg (nT/yr)", "dh (nT/yr)"};
    double values[6] = {0, 0, 0, 0, 0, 0};
    for (int c = 2; c < 6; ++c) {
      if (!ParseDouble(tokens[c], &values[c])) {
        Fail(source, line_no, std::string(kColumn[c]) + " as a finite number",
             tokens[c]);
      }
    }
    if (n == 1 && m == 0) {
      // Index 0 (n = 0) is the monopole: absent from the file, zero.
      g.push_back(0);
      h.push_back(0);
      dg.push_back(0);
      dh.push_back(0);
    }
    g.push_back(values[2]);
    // h_n^0 multiplies sin(0): files carry 0; keep it out of the sum.
    h.push_back(m == 0 ? 0.0 : values[3]);
    dg.push_back(values[4]);
    dh.push_back(m == 0 ? 0.0 : values[5]);
    model.max_degree_ = n;
    if (m == n) {
      if (n >= kMaxDegree) {
        Fail(source, line_no + 1,
             "a terminator line of 9s by degree " + std::to_string(kMaxDegree));
      }
      ++expect_n;
      expect_m = 0;
    } else {
      ++expect_m;
    }
  }
  if (!have_header) {
    Fail(source, line_no + 1,
         "header line 'EPOCH MODEL-NAME RELEASE-DATE' (the file is empty)");
  }
  if (!terminated) {
    Fail(source, line_no + 1,
         model.max_degree_ == 0
             ? std::string("coefficient lines 'n m g h dg dh' and a "
                           "terminator line of 9s")
             : "coefficient line (" + std::to_string(expect_n) + " " +
                   std::to_string(expect_m) +
                   ") or a terminator line of 9s (end of file reached)");
  }
  if (model.max_degree_ == 0) {
    Fail(source, line_no, "at least degree 1 before the terminator line");
  }
  if (expect_m != 0) {
    Fail(source, line_no,
         "coefficient line (" + std::to_string(expect_n) + " " +
             std::to_string(expect_m) + ") before the terminator: degree " +
             std::to_string(expect_n) + " is incomplete");
  }
  model.g_ = std::move(g);
  model.h_ = std::move(h);
  model.dg_ = std::move(dg);
  model.dh_ = std::move(dh);
  model.legendre_ = SchmidtLegendre(model.max_degree_);
  return model;
}

MagneticModel MagneticModel::FromCofFile(const std::string& path) {
  std::ifstream file(path, std::ios::binary);
  if (!file)
    throw std::runtime_error(path + ": cannot open the coefficient file");
  std::ostringstream text;
  text << file.rdbuf();
  if (file.bad()) throw std::runtime_error(path + ": read error");
  return FromCofText(text.str(), path);
}

const MagneticModel& MagneticModel::Wmm2025() {
  static const MagneticModel model =
      FromCofText(kWmm2025Cof, "WMM2025.COF (built in)");
  return model;
}

bool MagneticModel::IsValidDate(double decimal_year) const {
  return decimal_year >= epoch_ && decimal_year < epoch_ + 5.0;
}

void MagneticModel::Synthesize(double lat_deg, double lon_deg, double alt_m,
                               double decimal_year, double* xyz,
                               double* rate) const {
  if (!std::isfinite(lat_deg) || !std::isfinite(lon_deg) ||
      !std::isfinite(alt_m) || !std::isfinite(decimal_year)) {
    throw std::invalid_argument(
        "MagneticModel::Field: latitude, longitude, altitude and date must be "
        "finite numbers");
  }
  if (!(std::fabs(lat_deg) <= 90.0)) {
    throw std::invalid_argument("MagneticModel::Field: latitude " +
                                std::to_string(lat_deg) +
                                " deg is outside [-90, 90]");
  }
  if (!(alt_m > -kWgs84SemiMajorAxis_m / 2.0)) {
    throw std::invalid_argument(
        "MagneticModel::Field: altitude " + std::to_string(alt_m) +
        " m is implausible (deeper than half the Earth radius)");
  }
  const double lat_rad = lat_deg * kDegToRad;
  const double lon_rad = lon_deg * kDegToRad;
  const GeocentricPoint pos = GeodeticToGeocentric(lat_rad, alt_m);

  const int n_max = max_degree_;
  const int size = legendre_.size();
  std::array<double, 3 * kStackSize> stack;
  std::vector<double> heap;
  double* buffer = stack.data();
  if (size > kStackSize) {
    heap.resize(3 * static_cast<std::size_t>(size));
    buffer = heap.data();
  }
  double* const p = buffer;
  double* const dp = buffer + size;
  double* const q = buffer + 2 * size;
  // Colatitude theta: cos(theta) = sin(geocentric lat), sin(theta) = cos(...).
  legendre_.Compute(pos.sin_lat, pos.cos_lat, p, dp, q);

  std::array<double, kStackDegree + 1> cos_stack, sin_stack;
  std::vector<double> cos_heap, sin_heap;
  double* cos_ml = cos_stack.data();
  double* sin_ml = sin_stack.data();
  if (n_max > kStackDegree) {
    cos_heap.resize(n_max + 1);
    sin_heap.resize(n_max + 1);
    cos_ml = cos_heap.data();
    sin_ml = sin_heap.data();
  }
  const double cos_l = std::cos(lon_rad), sin_l = std::sin(lon_rad);
  cos_ml[0] = 1.0;
  sin_ml[0] = 0.0;
  for (int m = 1; m <= n_max; ++m) {
    cos_ml[m] = cos_ml[m - 1] * cos_l - sin_ml[m - 1] * sin_l;
    sin_ml[m] = sin_ml[m - 1] * cos_l + cos_ml[m - 1] * sin_l;
  }

  // Field components in the geocentric spherical frame (WMM report
  // eqs. 10-12): B_r = -dV/dr, B_theta = -(1/r) dV/dtheta,
  // B_lambda = -(1/(r sin theta)) dV/dlambda with
  // V = a sum_n (a/r)^(n+1) sum_m (g cos(m lambda) + h sin(m lambda)) P_n^m.
  // The same sum over dg, dh gives the rates (the synthesis is linear).
  const double dt = decimal_year - epoch_;
  const double ratio = kReferenceRadius_m / pos.radius_m;
  double ratio_pow = ratio * ratio;  // (a/r)^(n+2) after the update, n = 1
  double b[3] = {0, 0, 0};           // r, theta, lambda
  double db[3] = {0, 0, 0};          // their rates
  for (int n = 1; n <= n_max; ++n) {
    ratio_pow *= ratio;
    double sum_r = 0, sum_theta = 0, sum_lambda = 0;
    double dsum_r = 0, dsum_theta = 0, dsum_lambda = 0;
    for (int m = 0; m <= n; ++m) {
      const int i = SchmidtLegendre::Index(n, m);
      const double g = g_[i] + dt * dg_[i];
      const double h = h_[i] + dt * dh_[i];
      const double gc_hs = g * cos_ml[m] + h * sin_ml[m];
      const double gs_hc = g * sin_ml[m] - h * cos_ml[m];
      sum_r += gc_hs * p[i];
      sum_theta += gc_hs * dp[i];
      sum_lambda += m * gs_hc * q[i];
      if (rate != nullptr) {
        const double dgc_hs = dg_[i] * cos_ml[m] + dh_[i] * sin_ml[m];
        const double dgs_hc = dg_[i] * sin_ml[m] - dh_[i] * cos_ml[m];
        dsum_r += dgc_hs * p[i];
        dsum_theta += dgc_hs * dp[i];
        dsum_lambda += m * dgs_hc * q[i];
      }
    }
    b[0] += ratio_pow * (n + 1) * sum_r;
    b[1] -= ratio_pow * sum_theta;
    b[2] += ratio_pow * sum_lambda;
    db[0] += ratio_pow * (n + 1) * dsum_r;
    db[1] -= ratio_pow * dsum_theta;
    db[2] += ratio_pow * dsum_lambda;
  }

  // Geocentric north = -B_theta, east = B_lambda, down = -B_r, rotated by
  // psi = geocentric - geodetic latitude about the east axis (WMM report
  // eq. 17).
  const double sin_lat = std::sin(lat_rad), cos_lat = std::cos(lat_rad);
  const double sin_psi = pos.sin_lat * cos_lat - pos.cos_lat * sin_lat;
  const double cos_psi = pos.cos_lat * cos_lat + pos.sin_lat * sin_lat;
  const auto rotate = [&](const double* v, double* out) {
    const double x_c = -v[1], y_c = v[2], z_c = -v[0];
    out[0] = x_c * cos_psi - z_c * sin_psi;
    out[1] = y_c;
    out[2] = x_c * sin_psi + z_c * cos_psi;
  };
  rotate(b, xyz);
  if (rate != nullptr) rotate(db, rate);
}

namespace {

GeomagneticField Elements(const double* xyz) {
  GeomagneticField out;
  out.x_nT = xyz[0];
  out.y_nT = xyz[1];
  out.z_nT = xyz[2];
  out.h_nT = std::hypot(out.x_nT, out.y_nT);
  out.f_nT = std::hypot(out.h_nT, out.z_nT);
  out.incl_deg = std::atan2(out.z_nT, out.h_nT) * kRadToDeg;
  out.decl_deg = std::atan2(out.y_nT, out.x_nT) * kRadToDeg;
  return out;
}

}  // namespace

GeomagneticField MagneticModel::Field(double lat_deg, double lon_deg,
                                      double alt_m, double decimal_year) const {
  double xyz[3];
  Synthesize(lat_deg, lon_deg, alt_m, decimal_year, xyz, nullptr);
  return Elements(xyz);
}

GeomagneticFieldWithRate MagneticModel::FieldWithRate(
    double lat_deg, double lon_deg, double alt_m, double decimal_year) const {
  double xyz[3], rate[3];
  Synthesize(lat_deg, lon_deg, alt_m, decimal_year, xyz, rate);
  GeomagneticFieldWithRate out;
  out.field = Elements(xyz);
  const GeomagneticField& f = out.field;
  GeomagneticField& d = out.per_year;
  d.x_nT = rate[0];
  d.y_nT = rate[1];
  d.z_nT = rate[2];
  // Chain rule on H = hypot(X, Y), F = hypot(H, Z), I = atan2(Z, H),
  // D = atan2(Y, X).
  if (f.h_nT > 0) {
    d.h_nT = (f.x_nT * d.x_nT + f.y_nT * d.y_nT) / f.h_nT;
    d.decl_deg =
        (f.x_nT * d.y_nT - f.y_nT * d.x_nT) / (f.h_nT * f.h_nT) * kRadToDeg;
  }
  if (f.f_nT > 0) {
    d.f_nT = (f.h_nT * d.h_nT + f.z_nT * d.z_nT) / f.f_nT;
    d.incl_deg =
        (f.h_nT * d.z_nT - f.z_nT * d.h_nT) / (f.f_nT * f.f_nT) * kRadToDeg;
  }
  return out;
}

CompassZone ClassifyCompassZone(double h_nT) {
  if (h_nT < kWmmBlackoutH_nT) return CompassZone::kBlackout;
  if (h_nT < kWmmCautionH_nT) return CompassZone::kCaution;
  return CompassZone::kNormal;
}

double ParseDecimalYear(const std::string& text) {
  const auto fail = [&text]() -> double {
    throw std::invalid_argument(
        "'" + text +
        "' is not a date: expected YYYY-MM-DD (optionally followed by "
        "Thh:mm[:ss[.s]] UTC) or a decimal year such as 2025.5");
  };
  std::string_view s(text);
  while (!s.empty() && std::isspace(static_cast<unsigned char>(s.front())))
    s.remove_prefix(1);
  while (!s.empty() && std::isspace(static_cast<unsigned char>(s.back())))
    s.remove_suffix(1);
  if (s.empty()) return fail();

  const bool calendar = s.size() >= 10 && s[4] == '-' && s[7] == '-';
  if (!calendar) {
    double value = 0;
    if (!ParseDouble(s, &value)) return fail();
    return value;
  }
  const auto digits = [&s](std::size_t pos, std::size_t count, int* value) {
    if (pos + count > s.size()) return false;
    *value = 0;
    for (std::size_t i = pos; i < pos + count; ++i) {
      if (s[i] < '0' || s[i] > '9') return false;
      *value = *value * 10 + (s[i] - '0');
    }
    return true;
  };
  int year = 0, month = 0, day = 0;
  if (!digits(0, 4, &year) || !digits(5, 2, &month) || !digits(8, 2, &day)) {
    return fail();
  }
  static constexpr int kDaysInMonth[] = {31, 28, 31, 30, 31, 30,
                                         31, 31, 30, 31, 30, 31};
  if (month < 1 || month > 12) return fail();
  const bool leap = IsLeapYear(year);
  const int month_days = kDaysInMonth[month - 1] + (month == 2 && leap ? 1 : 0);
  if (day < 1 || day > month_days) return fail();

  double day_fraction = 0;
  std::string_view rest = s.substr(10);
  if (!rest.empty()) {
    if (rest.back() == 'Z') rest.remove_suffix(1);
    if (rest.empty() || (rest[0] != 'T' && rest[0] != ' ')) return fail();
    rest.remove_prefix(1);
    int hour = 0, minute = 0;
    double second = 0;
    if (rest.size() < 5 || rest[2] != ':') return fail();
    const std::string_view time(rest);
    const auto two = [](std::string_view t, std::size_t pos, int* value) {
      if (pos + 2 > t.size() || t[pos] < '0' || t[pos] > '9' ||
          t[pos + 1] < '0' || t[pos + 1] > '9') {
        return false;
      }
      *value = (t[pos] - '0') * 10 + (t[pos + 1] - '0');
      return true;
    };
    if (!two(time, 0, &hour) || !two(time, 3, &minute)) return fail();
    if (time.size() > 5) {
      if (time[5] != ':' || time.size() < 8) return fail();
      const std::string_view sec = time.substr(6);
      if (sec[0] < '0' || sec[0] > '9' || !ParseDouble(sec, &second))
        return fail();
    }
    if (hour > 23 || minute > 59 || !(second >= 0.0 && second < 61.0))
      return fail();
    day_fraction = (hour * 3600.0 + minute * 60.0 + second) / 86400.0;
  }

  int day_of_year = day;
  for (int k = 0; k + 1 < month; ++k) {
    day_of_year += kDaysInMonth[k] + (k == 1 && leap ? 1 : 0);
  }
  const double days_in_year = leap ? 366.0 : 365.0;
  return year + (day_of_year - 1 + day_fraction) / days_in_year;
}

}  // namespace fluxtrim::models
