// ShiftByLag (src/core/lag.h): the alignment fit estimates and apply uses.
#include "src/core/lag.h"

#include <cmath>
#include <limits>
#include <vector>

#include <gtest/gtest.h>

namespace fluxtrim::core {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::vector<double> Times(std::size_t n, double rate) {
  std::vector<double> t(n);
  for (std::size_t i = 0; i < n; ++i) t[i] = static_cast<double>(i) / rate;
  return t;
}

TEST(ShiftByLag, ZeroLagReturnsTheInput) {
  const auto t = Times(20, 10.0);
  std::vector<double> f(20);
  for (std::size_t i = 0; i < 20; ++i) f[i] = std::sin(0.3 * static_cast<double>(i));
  EXPECT_EQ(ShiftByLag(t, f, 0.0, 10.0), f);
}

TEST(ShiftByLag, WholeSampleLagPicksTheLaterSample) {
  // lag_s > 0: the value recorded at t measured the field at t - lag, so
  // the aligned value at t is the recorded one at t + lag.
  const auto t = Times(30, 10.0);
  std::vector<double> f(30);
  for (std::size_t i = 0; i < 30; ++i) f[i] = static_cast<double>(i * i);
  const auto g = ShiftByLag(t, f, 0.2, 10.0);
  for (std::size_t i = 0; i + 2 < 30; ++i) EXPECT_DOUBLE_EQ(g[i], f[i + 2]) << i;
  // Beyond the end the end value repeats (Grid1D clamping).
  EXPECT_DOUBLE_EQ(g[29], f[29]);
}

TEST(ShiftByLag, FractionalLagIsExactOnQuadratics) {
  // The Catmull-Rom spline (Keys 1981, a = -1/2) reproduces polynomials up
  // to degree two exactly away from the ends.
  const auto t = Times(40, 10.0);
  std::vector<double> f(40);
  auto q = [](double x) { return 3.0 - 2.0 * x + 0.5 * x * x; };
  for (std::size_t i = 0; i < 40; ++i) f[i] = q(t[i]);
  const double lag = 0.037;
  const auto g = ShiftByLag(t, f, lag, 10.0);
  for (std::size_t i = 1; i + 3 < 40; ++i) {
    EXPECT_NEAR(g[i], q(t[i] + lag), 1e-12) << i;  // rounding of nT-scale sums
  }
}

TEST(ShiftByLag, ErrorOnABandLimitedSignalIsSmall) {
  // A 0.9 Hz sine (the band's upper edge) at 10 Hz: Catmull-Rom's error is
  // O(h^3 f''') ~ (2 pi 0.9 / 10)^3 / 16 ~ 0.012 of the amplitude (Keys
  // 1981, third-order convergence); 0.02 bounds it.
  const auto t = Times(400, 10.0);
  std::vector<double> f(400);
  const double w = 2 * M_PI * 0.9;
  for (std::size_t i = 0; i < 400; ++i) f[i] = std::sin(w * t[i]);
  const auto g = ShiftByLag(t, f, -0.15, 10.0);
  for (std::size_t i = 3; i + 3 < 400; ++i) {
    EXPECT_NEAR(g[i], std::sin(w * (t[i] - 0.15)), 0.02) << i;
  }
}

TEST(ShiftByLag, SegmentsAreShiftedOnTheirOwn) {
  auto t = Times(40, 10.0);
  for (std::size_t i = 20; i < 40; ++i) t[i] += 5.0;  // time gap after 19
  std::vector<double> f(40);
  for (std::size_t i = 0; i < 40; ++i) f[i] = i < 20 ? 1.0 * static_cast<double>(i) : 1000.0;
  f[30] = kNaN;
  const auto g = ShiftByLag(t, f, 0.1, 10.0);
  // The last sample before the gap does not borrow from after it.
  EXPECT_DOUBLE_EQ(g[19], 19.0);
  EXPECT_DOUBLE_EQ(g[18], 19.0);
  EXPECT_TRUE(std::isnan(g[30]));
  EXPECT_DOUBLE_EQ(g[29], 1000.0);
  const auto runs = ContiguousRuns(t, f, 10.0);
  ASSERT_EQ(runs.size(), 3u);
  EXPECT_EQ(runs[0].end, 20u);
  EXPECT_EQ(runs[1].begin, 20u);
  EXPECT_EQ(runs[1].end, 30u);
  EXPECT_EQ(runs[2].begin, 31u);
}

TEST(ShiftByLag, BadArgumentsThrow) {
  EXPECT_THROW(ShiftByLag({0, 1}, {1}, 0.1, 10.0), std::invalid_argument);
  EXPECT_THROW(ShiftByLag({0, 1}, {1, 2}, 0.1, 0.0), std::invalid_argument);
}

}  // namespace
}  // namespace fluxtrim::core
