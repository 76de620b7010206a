#include "models/legendre.h"

#include <cmath>
#include <stdexcept>
#include <string>

namespace fluxtrim::models {

SchmidtLegendre::SchmidtLegendre(int max_degree) : max_degree_(max_degree) {
  if (max_degree < 0) {
    throw std::invalid_argument(
        "SchmidtLegendre: max_degree must be >= 0, got " +
        std::to_string(max_degree));
  }
  diagonal_.assign(max_degree + 1, 1.0);
  for (int m = 2; m <= max_degree; ++m) {
    diagonal_[m] = std::sqrt((2.0 * m - 1.0) / (2.0 * m));
  }
  a_.assign(size(), 0.0);
  b_.assign(size(), 0.0);
  for (int m = 0; m <= max_degree; ++m) {
    for (int n = m + 1; n <= max_degree; ++n) {
      const double denom = std::sqrt(double(n) * n - double(m) * m);
      a_[Index(n, m)] = (2.0 * n - 1.0) / denom;
      b_[Index(n, m)] =
          std::sqrt(double(n - 1) * (n - 1) - double(m) * m) / denom;
    }
  }
}

void SchmidtLegendre::Compute(double cos_theta, double sin_theta, double* p,
                              double* dp_dtheta, double* p_over_sin) const {
  const double x = cos_theta;
  const double s = sin_theta;
  // Each entry depends only on entries already written, so the caller's
  // arrays are the working storage; the recursions need all three, so an
  // array the caller does not want is computed into scratch.
  std::vector<double> scratch_p, scratch_dp, scratch_q;
  if (p == nullptr) {
    scratch_p.resize(size());
    p = scratch_p.data();
  }
  if (dp_dtheta == nullptr) {
    scratch_dp.resize(size());
    dp_dtheta = scratch_dp.data();
  }
  if (p_over_sin == nullptr) {
    scratch_q.resize(size());
    p_over_sin = scratch_q.data();
  }
  double* const q = p_over_sin;
  double* const dp = dp_dtheta;

  p[0] = 1.0;
  dp[0] = 0.0;
  q[0] = 0.0;
  for (int m = 0; m <= max_degree_; ++m) {
    const int mm = Index(m, m);
    if (m >= 1) {
      const int prev = Index(m - 1, m - 1);
      const double k = diagonal_[m];
      p[mm] = k * s * p[prev];
      dp[mm] = k * (x * p[prev] + s * dp[prev]);
      q[mm] = (m == 1) ? 1.0 : k * s * q[prev];
    }
    for (int n = m + 1; n <= max_degree_; ++n) {
      const int i = Index(n, m);
      const int i1 = Index(n - 1, m);
      const double a = a_[i];
      p[i] = a * x * p[i1];
      dp[i] = a * (x * dp[i1] - s * p[i1]);
      q[i] = a * x * q[i1];
      if (n - 2 >= m) {
        const int i2 = Index(n - 2, m);
        const double b = b_[i];
        p[i] -= b * p[i2];
        dp[i] -= b * dp[i2];
        q[i] -= b * q[i2];
      }
    }
  }
}

}  // namespace fluxtrim::models
