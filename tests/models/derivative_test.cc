// The centred derivative of the term builder against SciPy's
// Savitzky-Golay coefficients (scipy.signal.savgol_coeffs, Debian
// python3-scipy, run live).
#include <cmath>
#include <sstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "models/tolles_lawson.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::models {
namespace {

constexpr int kHalfWidths[] = {1, 2, 3, 5, 10, 20};
constexpr double kSteps[] = {0.1, 0.01};

// One Python run for every (k, dt): the weights, k by k, dt by dt.
std::vector<double> SciPyWeights() {
  std::ostringstream cmd;
  cmd << FLUXTRIM_PYTHON << " -c \"import scipy.signal as s\n"
      << "for k in (1, 2, 3, 5, 10, 20):\n"
      << "  for dt in (0.1, 0.01):\n"
      << "    print(' '.join(repr(float(v)) for v in s.savgol_coeffs("
      << "2 * k + 1, 3 if k >= 2 else 2, deriv=1, delta=dt, use='dot')))\" "
      << "2>/dev/null";
  std::istringstream in(test_support::RunCommand(cmd.str()).output);
  std::vector<double> w;
  double v;
  while (in >> v) w.push_back(v);
  return w;
}

TEST(DerivativeTest, WeightsEqualSciPySavitzkyGolayCoefficients) {
  // Relative 1e-10: both sides solve a tiny, well-conditioned system.
  const std::vector<double> all = SciPyWeights();
  if (all.empty()) GTEST_SKIP() << "python3-scipy is not installed";
  std::size_t at = 0;
  for (int k : kHalfWidths) {
    for (double dt : kSteps) {
      ASSERT_LE(at + static_cast<std::size_t>(2 * k + 1), all.size());
      const double* ref = &all[at];
      at += static_cast<std::size_t>(2 * k + 1);
      for (int j = -k; j <= k; ++j) {
        const double w = DerivativeWeight(k, j, dt);
        const double r = ref[j + k];
        EXPECT_NEAR(w, r, 1e-10 * std::abs(ref[2 * k]))
            << "k " << k << " j " << j << " dt " << dt;
      }
    }
  }
  EXPECT_EQ(at, all.size());
}

TEST(DerivativeTest, CubicIsExactAndFlatAcrossTheFitBand) {
  // Exact on a cubic (the defining property), and at 10 Hz with k = 2 the
  // gain at 0.9 Hz is within 1 % of the true derivative.
  const int k = 2;
  const double dt = 0.1;
  double d = 0;
  for (int j = -k; j <= k; ++j) {
    const double t = j * dt;
    d += DerivativeWeight(k, j, dt) * (1.0 + 2.0 * t - 3.0 * t * t + 0.5 * t * t * t);
  }
  EXPECT_NEAR(d, 2.0, 1e-12);
  const double w = 2 * 3.14159265358979323846 * 0.9;
  double gain = 0;
  for (int j = 1; j <= k; ++j) gain += 2 * DerivativeWeight(k, j, dt) * std::sin(w * j * dt);
  EXPECT_NEAR(gain / w, 1.0, 0.01);
}

}  // namespace
}  // namespace fluxtrim::models
