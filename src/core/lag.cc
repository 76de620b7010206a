#include "src/core/lag.h"

#include <cmath>
#include <limits>
#include <stdexcept>

#include <ceres/cubic_interpolation.h>

#include "models/huge_pages.h"

namespace fluxtrim::core {

using models::HugeVector;

std::vector<SampleRun> ContiguousRuns(const std::vector<double>& time,
                                      const std::vector<double>& f,
                                      double sample_rate_hz,
                                      double gap_factor) {
  if (time.size() != f.size()) {
    throw std::invalid_argument("time and f must have the same length");
  }
  if (!(sample_rate_hz > 0) || !std::isfinite(sample_rate_hz)) {
    throw std::invalid_argument("sample rate must be positive");
  }
  const double max_step = gap_factor / sample_rate_hz;
  std::vector<SampleRun> runs;
  const std::size_t n = time.size();
  std::size_t i = 0;
  while (i < n) {
    if (!std::isfinite(time[i]) || !std::isfinite(f[i])) {
      ++i;
      continue;
    }
    SampleRun run;
    run.begin = i;
    ++i;
    while (i < n && std::isfinite(time[i]) && std::isfinite(f[i])) {
      const double dt = time[i] - time[i - 1];
      if (!(dt > 0) || dt > max_step) break;
      ++i;
    }
    run.end = i;
    runs.push_back(run);
  }
  return runs;
}

std::vector<double> ShiftByLag(const std::vector<double>& time,
                               const std::vector<double>& f, double lag_s,
                               double sample_rate_hz, double gap_factor) {
  const std::vector<SampleRun> runs =
      ContiguousRuns(time, f, sample_rate_hz, gap_factor);
  std::vector<double> out =
      HugeVector(f.size(), std::numeric_limits<double>::quiet_NaN());
  const double shift = lag_s * sample_rate_hz;
  for (const SampleRun& run : runs) {
    if (shift == 0.0) {
      for (std::size_t i = run.begin; i < run.end; ++i) out[i] = f[i];
      continue;
    }
    const ceres::Grid1D<double> grid(f.data() + run.begin, 0,
                                     static_cast<int>(run.end - run.begin));
    const ceres::CubicInterpolator<ceres::Grid1D<double>> interpolator(grid);
    for (std::size_t i = run.begin; i < run.end; ++i) {
      const double x = static_cast<double>(i - run.begin) + shift;
      interpolator.Evaluate(x, &out[i]);
    }
  }
  return out;
}

}  // namespace fluxtrim::core
