#pragma once
// Schmidt semi-normalised associated Legendre functions P_n^m(cos theta), as
// used in geomagnetism, with their colatitude derivatives and a pole-safe
// quotient P_n^m / sin(theta).
//
// Normalisation (Schmidt semi-normalised, no Condon-Shortley phase):
//   P_n^m(x) = sqrt((2 - delta_m0) (n - m)! / (n + m)!) (1 - x^2)^(m/2)
//              d^m P_n(x) / dx^m
// so that sum_{m=0..n} [P_n^m(cos theta)]^2 = 1 for every theta.
//
// Recursions (WMM2025 Technical Report, NOAA NCEI / BGS, section on the
// associated Legendre functions; Langel 1987, "The main field", in
// Geomagnetism vol. 1, eqs. 13-14; both from memory):
//   P_m^m     = k_m sin(theta) P_{m-1}^{m-1},  k_1 = 1,
//               k_m = sqrt((2m - 1) / (2m)) for m >= 2
//   P_n^m     = [(2n - 1) cos(theta) P_{n-1}^m
//                 - sqrt((n - 1)^2 - m^2) P_{n-2}^m] / sqrt(n^2 - m^2)
// and their term-by-term derivatives with respect to theta. The quotient
// Q_n^m = P_n^m / sin(theta) (m >= 1) obeys the same recursions with
// Q_1^1 = 1, which makes the east component of a field finite and exact at
// the geographic poles without a special case: at theta = 0 only m = 1
// survives, Q_n^1 = sqrt(n (n + 1) / 2) (the limit the WMM report's pole
// treatment computes by a separate recursion).
//
// Array layout: every output array has (N + 1)(N + 2) / 2 entries, entry
// Index(n, m) = n (n + 1) / 2 + m for 0 <= m <= n <= N.

#include <vector>

namespace fluxtrim::models {

class SchmidtLegendre {
 public:
  // max_degree N >= 0. Precomputes the recursion factors.
  explicit SchmidtLegendre(int max_degree = 0);

  int max_degree() const { return max_degree_; }
  // Number of entries of each output array.
  int size() const { return (max_degree_ + 1) * (max_degree_ + 2) / 2; }
  static int Index(int n, int m) { return n * (n + 1) / 2 + m; }

  // Evaluates at colatitude theta given as cos_theta and sin_theta
  // (sin_theta >= 0; pass both so callers keep exact values at the poles).
  // Writes size() entries to each non-null array:
  //   p[i]          P_n^m(cos theta)
  //   dp_dtheta[i]  d P_n^m / d theta (per radian)
  //   p_over_sin[i] P_n^m / sin theta for m >= 1 (finite at the poles);
  //                 0 for m = 0, where it is not used.
  void Compute(double cos_theta, double sin_theta, double* p, double* dp_dtheta,
               double* p_over_sin) const;

 private:
  int max_degree_ = 0;
  std::vector<double> diagonal_;  // k_m, indexed by m
  std::vector<double> a_, b_;     // recursion factors, indexed Index(n, m)
};

}  // namespace fluxtrim::models
