// Schmidt semi-normalised associated Legendre functions against SciPy and
// against identities they must satisfy.

#include "models/legendre.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <sstream>
#include <string>
#include <vector>

#include "tests/support/subprocess.h"

namespace fluxtrim::models {
namespace {

constexpr double kPi = 3.14159265358979323846;

struct Reference {
  int k, n, m;  // k indexes the colatitudes asked for
  double p, dp_dtheta;
};

// SciPy 1.10 scipy.special.lpmn (Ferrers functions with the Condon-Shortley
// phase (-1)^m, and their x-derivatives), converted to Schmidt
// semi-normalisation sqrt((2 - delta_m0) (n-m)!/(n+m)!) (-1)^m P and to the
// colatitude derivative dP/dtheta = -sin(theta) dP/dx. Queried through
// FLUXTRIM_PYTHON (Debian's python3-scipy), once for all colatitudes.
std::vector<Reference> SciPyReference(int max_degree,
                                      const std::vector<double>& thetas) {
  std::string command =
      std::string(FLUXTRIM_PYTHON) +
      " -c '"
      "import math,sys\n"
      "from scipy.special import lpmn\n"
      "N=int(sys.argv[1])\n"
      "for k,a in enumerate(sys.argv[2:]):\n"
      "  t=float(a); x=math.cos(t); s=math.sin(t)\n"
      "  P,D=lpmn(N,N,x)\n"
      "  for n in range(N+1):\n"
      "    for m in range(n+1):\n"
      "      c=math.sqrt((1 if m==0 else 2)*math.factorial(n-m)"
      "/math.factorial(n+m))*(-1)**m\n"
      "      print(k,n,m,repr(c*P[m,n]),repr(-s*c*D[m,n]))\n"
      "' " +
      std::to_string(max_degree);
  for (double theta : thetas) {
    char arg[40];
    std::snprintf(arg, sizeof arg, " %.17g", theta);
    command += arg;
  }
  std::vector<Reference> out;
  std::istringstream in(test_support::RunCommand(command).output);
  Reference r{};
  while (in >> r.k >> r.n >> r.m >> r.p >> r.dp_dtheta) out.push_back(r);
  return out;
}

TEST(SchmidtLegendreTest, MatchesSciPyUpToDegreeThirty) {
  constexpr int kDegree = 30;
  const SchmidtLegendre legendre(kDegree);
  // Values are O(1); both sides run three-term recursions of ~30 steps, each
  // losing at most a few ulps (2.2e-16): 1e-12 bounds the accumulated error
  // with a wide margin, while any wrong factor shows at 1e-3 or more.
  constexpr double kTol = 1e-12;
  std::vector<double> thetas;
  for (double theta_deg : {0.5, 17.0, 63.2, 90.0, 121.0, 179.3}) {
    thetas.push_back(theta_deg * kPi / 180.0);
  }
  const std::vector<Reference> ref = SciPyReference(kDegree, thetas);
  ASSERT_EQ(ref.size(), thetas.size() * legendre.size())
      << "SciPy query failed";
  std::vector<double> p(legendre.size()), dp(legendre.size());
  int current = -1;
  for (const Reference& r : ref) {
    const double theta = thetas.at(r.k);
    if (r.k != current) {
      legendre.Compute(std::cos(theta), std::sin(theta), p.data(), dp.data(),
                       nullptr);
      current = r.k;
    }
    const int i = SchmidtLegendre::Index(r.n, r.m);
    EXPECT_NEAR(p[i], r.p, kTol)
        << "n=" << r.n << " m=" << r.m << " theta=" << theta;
    // Derivatives grow like n: scale the tolerance.
    EXPECT_NEAR(dp[i], r.dp_dtheta, kTol * (r.n + 1))
        << "n=" << r.n << " m=" << r.m << " theta=" << theta;
  }
}

TEST(SchmidtLegendreTest, SquaresOverOrdersSumToOneForEveryDegree) {
  // Addition theorem for Schmidt semi-normalised functions:
  // sum_{m=0..n} [P_n^m(cos theta)]^2 = 1 (Winch, Ivers, Turner & Stening
  // 2005, "Geomagnetism and Schmidt quasi-normalization", Geophys. J. Int.
  // 160:487; from memory). Degree 200 also checks the recursion is stable.
  constexpr int kDegree = 200;
  const SchmidtLegendre legendre(kDegree);
  // 201 squares of O(1) numbers after 200-step recursions: 1e-11.
  constexpr double kTol = 1e-11;
  std::vector<double> p(legendre.size());
  for (double theta_deg : {0.0, 1e-3, 30.0, 89.0, 90.0, 150.0, 180.0}) {
    const double theta = theta_deg * kPi / 180.0;
    legendre.Compute(std::cos(theta), std::sin(theta), p.data(), nullptr,
                     nullptr);
    for (int n = 0; n <= kDegree; ++n) {
      double sum = 0;
      for (int m = 0; m <= n; ++m) {
        const double v = p[SchmidtLegendre::Index(n, m)];
        sum += v * v;
      }
      EXPECT_NEAR(sum, 1.0, kTol) << "n=" << n << " theta=" << theta_deg;
    }
  }
}

TEST(SchmidtLegendreTest, DerivativeMatchesCentralDifferences) {
  constexpr int kDegree = 12;
  const SchmidtLegendre legendre(kDegree);
  // Central difference with step h has error ~ h^2 |P'''| / 6 + eps / h;
  // |P'''| <= ~n^3 = 1728 for n = 12: h = 1e-5 gives ~3e-8 + 2e-11.
  constexpr double kStep = 1e-5;
  constexpr double kTol = 1e-7;
  const int size = legendre.size();
  std::vector<double> p(size), dp(size), plus(size), minus(size);
  for (double theta : {0.3, 1.2, 2.9}) {
    legendre.Compute(std::cos(theta), std::sin(theta), p.data(), dp.data(),
                     nullptr);
    legendre.Compute(std::cos(theta + kStep), std::sin(theta + kStep),
                     plus.data(), nullptr, nullptr);
    legendre.Compute(std::cos(theta - kStep), std::sin(theta - kStep),
                     minus.data(), nullptr, nullptr);
    for (int i = 0; i < size; ++i) {
      EXPECT_NEAR(dp[i], (plus[i] - minus[i]) / (2 * kStep), kTol) << i;
    }
  }
}

TEST(SchmidtLegendreTest, QuotientBySineIsExactAwayFromAndAtThePoles) {
  constexpr int kDegree = 12;
  const SchmidtLegendre legendre(kDegree);
  const int size = legendre.size();
  std::vector<double> p(size), q(size);
  // Away from the poles q * sin(theta) must give p back (rounding only).
  constexpr double kTol = 1e-14;
  const double theta = 0.7;
  legendre.Compute(std::cos(theta), std::sin(theta), p.data(), nullptr,
                   q.data());
  for (int n = 1; n <= kDegree; ++n) {
    for (int m = 1; m <= n; ++m) {
      const int i = SchmidtLegendre::Index(n, m);
      EXPECT_NEAR(q[i] * std::sin(theta), p[i], kTol) << n << " " << m;
    }
  }
  // At the poles: P_n^1 / sin(theta) -> sqrt(2 / (n (n+1))) P_n'(+-1) with
  // P_n'(1) = n (n+1) / 2 and P_n'(-1) = (-1)^(n+1) n (n+1) / 2 (Abramowitz &
  // Stegun 8.6.x / 22.x, from memory), i.e. +-sqrt(n (n+1) / 2); every
  // m >= 2 quotient vanishes there.
  for (double x : {1.0, -1.0}) {
    legendre.Compute(x, 0.0, p.data(), nullptr, q.data());
    for (int n = 1; n <= kDegree; ++n) {
      const double sign = (x > 0 || n % 2 == 1) ? 1.0 : -1.0;
      EXPECT_NEAR(q[SchmidtLegendre::Index(n, 1)],
                  sign * std::sqrt(n * (n + 1) / 2.0), kTol * n)
          << "n=" << n << " x=" << x;
      for (int m = 2; m <= n; ++m) {
        EXPECT_EQ(q[SchmidtLegendre::Index(n, m)], 0.0) << n << " " << m;
      }
    }
  }
}

TEST(SchmidtLegendreTest, RejectsNegativeDegree) {
  EXPECT_THROW(SchmidtLegendre(-1), std::invalid_argument);
}

}  // namespace
}  // namespace fluxtrim::models
