#include "src/core/metrics.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>
#include <string>

namespace fluxtrim::core {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

}  // namespace

double PeakToPeak(const double* x, std::size_t n) {
  double lo = 0, hi = 0;
  bool any = false;
  for (std::size_t i = 0; i < n; ++i) {
    if (std::isnan(x[i])) continue;
    if (!any) {
      lo = hi = x[i];
      any = true;
    } else {
      lo = std::min(lo, x[i]);
      hi = std::max(hi, x[i]);
    }
  }
  return any ? hi - lo : kNaN;
}

double PeakToPeak(const std::vector<double>& x) {
  return PeakToPeak(x.data(), x.size());
}

double Rms(const double* x, std::size_t n) {
  double sum = 0;
  std::size_t count = 0;
  for (std::size_t i = 0; i < n; ++i) {
    if (std::isnan(x[i])) continue;
    sum += x[i] * x[i];
    ++count;
  }
  return count > 0 ? std::sqrt(sum / count) : kNaN;
}

double Rms(const std::vector<double>& x) { return Rms(x.data(), x.size()); }

double FiniteRms(const std::vector<double>& x) {
  double sum = 0;
  std::size_t count = 0;
  for (double v : x) {
    if (std::isfinite(v)) {
      sum += v * v;
      ++count;
    }
  }
  return count > 0 ? std::sqrt(sum / static_cast<double>(count)) : kNaN;
}

double StandardDeviation(const double* x, std::size_t n) {
  // Two passes (mean, then squared deviations): the one-pass formula loses
  // everything to cancellation on a 50000 nT field with 0.1 nT variation.
  double sum = 0;
  std::size_t count = 0;
  for (std::size_t i = 0; i < n; ++i) {
    if (std::isnan(x[i])) continue;
    sum += x[i];
    ++count;
  }
  if (count == 0) return kNaN;
  const double mean = sum / count;
  double ss = 0;
  for (std::size_t i = 0; i < n; ++i) {
    if (std::isnan(x[i])) continue;
    ss += (x[i] - mean) * (x[i] - mean);
  }
  return std::sqrt(ss / count);
}

double StandardDeviation(const std::vector<double>& x) {
  return StandardDeviation(x.data(), x.size());
}

std::vector<ManeuverMetric> ManeuverPeakToPeak(
    const std::vector<double>& time, const std::vector<double>& band_before,
    const std::vector<double>& band_after,
    const std::vector<Maneuver>& maneuvers) {
  if (band_before.size() != time.size() || band_after.size() != time.size()) {
    throw std::invalid_argument(
        "ManeuverPeakToPeak: time, before and after differ in length (" +
        std::to_string(time.size()) + ", " +
        std::to_string(band_before.size()) + ", " +
        std::to_string(band_after.size()) + ")");
  }
  std::vector<ManeuverMetric> out;
  out.reserve(maneuvers.size());
  for (const Maneuver& m : maneuvers) {
    ManeuverMetric metric;
    metric.maneuver = m;
    double lo[2] = {0, 0}, hi[2] = {0, 0};
    bool any[2] = {false, false};
    for (std::size_t i = 0; i < time.size(); ++i) {
      // A sample belongs to the maneuver when start_s <= t <= end_s (a NaN
      // time belongs to none).
      if (!(time[i] >= m.start_s && time[i] <= m.end_s)) continue;
      ++metric.samples;
      const double v[2] = {band_before[i], band_after[i]};
      for (int k = 0; k < 2; ++k) {
        if (std::isnan(v[k])) continue;
        if (!any[k]) {
          lo[k] = hi[k] = v[k];
          any[k] = true;
        } else {
          lo[k] = std::min(lo[k], v[k]);
          hi[k] = std::max(hi[k], v[k]);
        }
      }
    }
    metric.pp_before_nT = any[0] ? hi[0] - lo[0] : kNaN;
    metric.pp_after_nT = any[1] ? hi[1] - lo[1] : kNaN;
    out.push_back(metric);
  }
  return out;
}

double Fom(const std::vector<ManeuverMetric>& metrics, bool after) {
  double sum = 0;
  bool any = false;
  for (const ManeuverMetric& m : metrics) {
    const double v = after ? m.pp_after_nT : m.pp_before_nT;
    if (std::isnan(v)) continue;
    sum += v;
    any = true;
  }
  return any ? sum : kNaN;
}

double ImprovementRatio(const std::vector<double>& band_before,
                        const std::vector<double>& band_after) {
  if (band_before.size() != band_after.size()) {
    throw std::invalid_argument(
        "ImprovementRatio: before and after differ in length (" +
        std::to_string(band_before.size()) + ", " +
        std::to_string(band_after.size()) + ")");
  }
  // Compare the same samples: a sample missing on either side is skipped.
  std::vector<double> before, after;
  before.reserve(band_before.size());
  after.reserve(band_after.size());
  for (std::size_t i = 0; i < band_before.size(); ++i) {
    if (std::isnan(band_before[i]) || std::isnan(band_after[i])) continue;
    before.push_back(band_before[i]);
    after.push_back(band_after[i]);
  }
  if (before.empty()) return kNaN;
  const double sd_after = StandardDeviation(after);
  if (!(sd_after > 0)) return kNaN;
  return StandardDeviation(before) / sd_after;
}

}  // namespace fluxtrim::core
