#pragma once
// Lag between the scalar sensor and the fluxgate.
//
// Sign convention (also in io/proto/model.proto): a positive lag means the
// scalar sensor's reading is late: the value f recorded at time t measured
// the field at t - lag_s. The aligned scalar field is therefore
// f_aligned(t) = f(t + lag_s).

#include <cstddef>
#include <vector>

namespace fluxtrim::core {

// Returns f evaluated at t + lag_s for every sample (the alignment that fit
// estimates and apply uses).
//
// Interpolation: the cubic Hermite spline with central-difference tangents
// (Catmull-Rom; Keys 1981 with a = -1/2), as ceres::CubicInterpolator over
// a ceres::Grid1D, in sample-index space with the shift lag_s *
// sample_rate_hz samples: between samples n and n+1 at fraction u,
//   f = p1 + u (c + u (b + u a)),  a = (-p0 + 3 p1 - 3 p2 + p3)/2,
//   b = (2 p0 - 5 p1 + 4 p2 - p3)/2,  c = (p2 - p0)/2,
// with p0..p3 = f[n-1..n+2]. Each contiguous segment is interpolated on its
// own: a segment ends where the time step is not in (0, gap_factor /
// sample_rate_hz] or where time or f is not finite. Within a segment,
// indices beyond its ends repeat the end value (Grid1D clamping), so the
// first/last |shift| + 1 samples of a segment are approximate. Non-finite
// samples stay NaN. lag_s = 0 returns f unchanged.
// Throws std::invalid_argument when sizes differ or the rate is not
// positive.
std::vector<double> ShiftByLag(const std::vector<double>& time,
                               const std::vector<double>& f, double lag_s,
                               double sample_rate_hz, double gap_factor = 1.5);

// Contiguous runs [begin, end) of samples (same segment rule as ShiftByLag).
struct SampleRun {
  std::size_t begin = 0;
  std::size_t end = 0;
};
std::vector<SampleRun> ContiguousRuns(const std::vector<double>& time,
                                      const std::vector<double>& f,
                                      double sample_rate_hz,
                                      double gap_factor = 1.5);

}  // namespace fluxtrim::core
