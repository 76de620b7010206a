#include "src/core/apply_summary.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <sstream>

#include "fluxtrim/version.h"
#include "src/core/apply.h"
#include "src/core/maneuvers.h"
#include "src/core/metrics.h"

namespace fluxtrim::core {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kPi = 3.14159265358979323846;
constexpr double kDeg = kPi / 180.0;
// Mean Earth radius for the local flat-Earth projection of short lines
// (IUGG mean radius R1 = 6371.0088 km, from memory).
constexpr double kEarthRadiusM = 6371008.8;

double Median(std::vector<double> v) {
  if (v.empty()) return kNaN;
  const std::size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid),
                   v.end());
  return v[mid];
}

double AngleDiffDeg(double a, double b) {
  double d = std::fmod(a - b, 360.0);
  if (d > 180) d -= 360;
  if (d < -180) d += 360;
  return d;
}

struct Line {
  std::size_t begin, end;  // rows [begin, end)
  double heading_deg;
};

// Straight, steady runs of the track at least min_duration_s long: the
// track direction (from positions, 2 s apart) stays within tolerance_deg
// of the run's first direction and the platform moves.
std::vector<Line> FindLines(const std::vector<double>& t,
                            const std::vector<double>& x,
                            const std::vector<double>& y, double rate_hz) {
  const double tolerance_deg = 15.0, min_duration_s = 60.0;
  const std::size_t n = t.size();
  const std::size_t w = std::max<std::size_t>(1, std::lround(rate_hz));
  std::vector<double> dir(n, kNaN);
  for (std::size_t i = w; i + w < n; ++i) {
    const double dx = x[i + w] - x[i - w], dy = y[i + w] - y[i - w];
    const double speed = std::hypot(dx, dy) / (t[i + w] - t[i - w]);
    if (std::isfinite(speed) && speed > 1.0) {
      dir[i] = std::fmod(std::atan2(dx, dy) / kDeg + 360.0, 360.0);
    }
  }
  std::vector<Line> lines;
  std::size_t i = 0;
  while (i < n) {
    if (!std::isfinite(dir[i])) {
      ++i;
      continue;
    }
    std::size_t j = i;
    double sx = 0, sy = 0;
    while (j < n && std::isfinite(dir[j]) &&
           std::abs(AngleDiffDeg(dir[j], dir[i])) < tolerance_deg) {
      sx += std::sin(dir[j] * kDeg);
      sy += std::cos(dir[j] * kDeg);
      ++j;
    }
    if (t[j - 1] - t[i] >= min_duration_s) {
      lines.push_back({i, j, std::fmod(std::atan2(sx, sy) / kDeg + 360, 360)});
    }
    i = j + (j == i ? 1 : 0);
  }
  return lines;
}

void AddReciprocalLines(const io::Table& out, double rate_hz,
                        proto::ApplySummary* summary) {
  if (!out.Has("lat") || !out.Has("lon")) return;
  const auto& t = out.Column("time");
  const auto& lat = out.Column("lat");
  const auto& lon = out.Column("lon");
  const auto& f_comp = out.Column("f_comp");
  const auto& f_int = out.Column("f_interference");
  const std::size_t n = t.size();
  std::vector<double> lats;
  for (double v : lat) {
    if (std::isfinite(v)) lats.push_back(v);
  }
  if (lats.empty()) return;
  const double lat0 = Median(lats) * kDeg;
  std::vector<double> x(n), y(n);  // east, north (m)
  for (std::size_t i = 0; i < n; ++i) {
    x[i] = lon[i] * kDeg * kEarthRadiusM * std::cos(lat0);
    y[i] = lat[i] * kDeg * kEarthRadiusM;
  }
  const std::vector<Line> lines = FindLines(t, x, y, rate_hz);
  for (std::size_t a = 0; a < lines.size(); ++a) {
    for (std::size_t b = a + 1; b < lines.size(); ++b) {
      const Line& la = lines[a];
      const Line& lb = lines[b];
      if (std::abs(std::abs(AngleDiffDeg(la.heading_deg, lb.heading_deg)) -
                   180.0) > 20.0) {
        continue;
      }
      // Along/across coordinates on line A's axis.
      const double ux = std::sin(la.heading_deg * kDeg);
      const double uy = std::cos(la.heading_deg * kDeg);
      std::vector<std::pair<double, std::size_t>> along_b;
      for (std::size_t i = lb.begin; i < lb.end; ++i) {
        along_b.push_back({x[i] * ux + y[i] * uy, i});
      }
      std::sort(along_b.begin(), along_b.end());
      std::vector<double> d_before, d_after;
      for (std::size_t i = la.begin; i < la.end; ++i) {
        const double s = x[i] * ux + y[i] * uy;
        auto it = std::lower_bound(
            along_b.begin(), along_b.end(),
            std::make_pair(s, std::size_t{0}));
        std::size_t best = n;
        double best_d = 20.0;  // m along track
        for (auto c : {it, it == along_b.begin() ? it : it - 1}) {
          if (c == along_b.end()) continue;
          const double d = std::abs(c->first - s);
          if (d < best_d) {
            best_d = d;
            best = c->second;
          }
        }
        if (best == n) continue;
        const double across =
            std::abs((x[i] - x[best]) * uy - (y[i] - y[best]) * ux);
        if (across > 100.0) continue;  // m: not the same ground
        const double fa = f_comp[i] + f_int[i], fb = f_comp[best] + f_int[best];
        if (!std::isfinite(fa) || !std::isfinite(fb)) continue;
        d_before.push_back(fa - fb);
        d_after.push_back(f_comp[i] - f_comp[best]);
      }
      if (d_before.size() < 20) continue;
      proto::ReciprocalLines* pair = summary->add_heading_error();
      pair->set_heading_a_deg(la.heading_deg);
      pair->set_heading_b_deg(lb.heading_deg);
      pair->set_start_a_s(t[la.begin]);
      pair->set_start_b_s(t[lb.begin]);
      pair->set_matched_samples(static_cast<std::uint32_t>(d_before.size()));
      pair->set_heading_error_before_nt(Median(d_before));
      pair->set_heading_error_after_nt(Median(d_after));
    }
  }
}

}  // namespace

std::vector<double> BandPassRuns(const BandPass& filter,
                                 const std::vector<double>& time,
                                 const std::vector<double>& x,
                                 double sample_rate_hz, double gap_factor) {
  const std::size_t n = x.size();
  std::vector<double> y(n, kNaN);
  std::size_t i = 0;
  while (i < n) {
    if (!std::isfinite(x[i]) || !std::isfinite(time[i])) {
      ++i;
      continue;
    }
    std::size_t j = i + 1;
    while (j < n && std::isfinite(x[j]) && std::isfinite(time[j]) &&
           time[j] > time[j - 1] &&
           time[j] - time[j - 1] <= gap_factor / sample_rate_hz) {
      ++j;
    }
    if (j - i >= filter.min_length()) filter.Filter(&x[i], j - i, &y[i]);
    i = j;
  }
  return y;
}

ApplySummaryResult SummariseApply(const proto::CompensationModel& model,
                                  const io::Table& out,
                                  const std::string& file) {
  ApplySummaryResult result;
  proto::ApplySummary& s = result.proto;
  s.set_file(file);
  s.set_tool_version(FLUXTRIM_VERSION);
  s.set_samples(static_cast<std::uint32_t>(out.rows()));
  s.set_lag_s(model.lag_s());
  s.set_field_source(model.inputs().field_source());
  for (const proto::Coefficient& c : model.coefficients()) {
    s.add_terms(c.name());
    proto::CoefficientSummary* cs = s.add_coefficients();
    cs->set_name(c.name());
    cs->set_value(c.value());
    cs->set_std_error(c.std_error());
    cs->set_unit(c.unit());
    cs->set_held(c.held());
    cs->set_note(c.note());
  }
  const auto& t = out.Column("time");
  const auto& f_comp = out.Column("f_comp");
  const auto& f_int = out.Column("f_interference");
  const auto& flags = out.Column("flags");
  std::uint32_t flagged = 0;
  for (double f : flags) flagged += f != 0;
  s.set_flagged_samples(flagged);
  const double rate = MedianRateHz(t);
  s.set_sample_rate_hz(rate);

  std::vector<double> before(out.rows());
  for (std::size_t i = 0; i < out.rows(); ++i) before[i] = f_comp[i] + f_int[i];
  BandPassOptions band;
  band.order = model.filter().order() > 0 ? model.filter().order() : 4;
  band.low_hz = model.filter().low_hz() > 0 ? model.filter().low_hz() : 0.1;
  band.high_hz = model.filter().high_hz() > 0 ? model.filter().high_hz() : 0.9;
  const BandPass filter(band, rate);
  result.band_before = BandPassRuns(filter, t, before, rate);
  result.band_after = BandPassRuns(filter, t, f_comp, rate);
  s.set_band_rms_before_nt(Rms(result.band_before));
  s.set_band_rms_after_nt(Rms(result.band_after));
  s.set_improvement_ratio(
      ImprovementRatio(result.band_before, result.band_after));
  if (!std::isfinite(s.band_rms_before_nt())) {
    s.add_warnings("the recording has no run long enough for the band-pass "
                   "filter: no band-passed figures");
  }

  if (out.Has("bx") && out.Has("by") && out.Has("bz")) {
    const ManeuverDetection detection = DetectManeuvers(out);
    // A validation box has pitch, roll and yaw maneuvers; turbulence and
    // turns on survey lines can look like one kind only, and their
    // peak-to-peak is geology, not a figure of merit.
    bool kinds[3] = {false, false, false};
    for (const Maneuver& m : detection.maneuvers) {
      kinds[static_cast<int>(m.kind)] = true;
    }
    const bool box = kinds[0] && kinds[1] && kinds[2];
    if (box) {
      s.set_maneuver_source(detection.source);
      const std::vector<ManeuverMetric> metrics = ManeuverPeakToPeak(
          t, result.band_before, result.band_after, detection.maneuvers);
      for (const ManeuverMetric& m : metrics) {
        proto::ManeuverSummary* ms = s.add_maneuvers();
        ms->set_heading_deg(m.maneuver.heading_deg);
        ms->set_kind(ManeuverKindName(m.maneuver.kind));
        ms->set_start_s(m.maneuver.start_s);
        ms->set_end_s(m.maneuver.end_s);
        ms->set_pp_before_nt(m.pp_before_nT);
        ms->set_pp_after_nt(m.pp_after_nT);
      }
      s.set_fom_before_nt(Fom(metrics, false));
      s.set_fom_after_nt(Fom(metrics, true));
    }
  }
  AddReciprocalLines(out, rate, &s);
  if (flagged > out.rows() / 10) {
    s.add_warnings(std::to_string(flagged) +
                   " samples are flagged (gaps, attitude outside the fit's "
                   "range or bad samples): see the flags channel");
  }
  return result;
}

std::string FormatApplySummary(const ApplySummaryResult& result) {
  const proto::ApplySummary& s = result.proto;
  std::ostringstream out;
  char line[256];
  std::snprintf(line, sizeof line,
                "Band-passed RMS %.4f -> %.4f nT, improvement ratio %.2f "
                "(%u samples, %u flagged)\n",
                s.band_rms_before_nt(), s.band_rms_after_nt(),
                s.improvement_ratio(), s.samples(), s.flagged_samples());
  out << line;
  if (s.maneuvers_size() > 0) {
    std::snprintf(line, sizeof line,
                  "Validation maneuvers (%d, from %s): FOM %.3f -> %.3f nT\n",
                  s.maneuvers_size(), s.maneuver_source().c_str(),
                  s.fom_before_nt(), s.fom_after_nt());
    out << line;
  }
  for (const proto::ReciprocalLines& r : s.heading_error()) {
    std::snprintf(line, sizeof line,
                  "Heading error, lines %.0f/%.0f deg (%u matched samples): "
                  "%.3f -> %.3f nT\n",
                  r.heading_a_deg(), r.heading_b_deg(), r.matched_samples(),
                  r.heading_error_before_nt(), r.heading_error_after_nt());
    out << line;
  }
  for (const std::string& w : s.warnings()) out << "warning: " << w << "\n";
  return out.str();
}

}  // namespace fluxtrim::core
