// Least-squares core (QR compression + Ceres) and the GCV ridge choice,
// checked against NumPy (tests/reference/numpy_lstsq.py, run live with
// /usr/bin/python3) on the same matrices.
#include "src/core/least_squares.h"

#include <cmath>
#include <cstdio>
#include <fstream>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <gtest/gtest.h>
#include <unistd.h>

#include "src/core/ridge.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::core {
namespace {

// Relative agreement with NumPy: both solve a problem of condition ~1e3
// (columns scaled over three decades) in double precision; backward-stable
// QR loses at most cond * eps ~ 1e-13 relative, so 1e-9 (the issue's
// requirement) leaves a wide margin for Ceres' stopping rule.
constexpr double kRelTol = 1e-9;

struct Reference {
  std::vector<double> x;
  std::vector<std::vector<double>> inverse;
  double gcv = 0;
};

bool PythonHasNumpy() {
  const std::string cmd =
      std::string(FLUXTRIM_PYTHON) + " -c 'import numpy' 2>/dev/null";
  return std::system(cmd.c_str()) == 0;
}

// Writes A, y to a temp file, runs numpy_lstsq.py, parses its output.
Reference RunNumpy(const Eigen::MatrixXd& a, const Eigen::VectorXd& y,
                   double lambda) {
  char path[] = "/tmp/fluxtrim_lstsq_XXXXXX";
  const int fd = mkstemp(path);
  EXPECT_GE(fd, 0);
  close(fd);
  {
    std::ofstream out(path);
    out.precision(17);
    out << a.rows() << " " << a.cols() << " " << lambda << "\n";
    for (long i = 0; i < a.rows(); ++i) {
      for (long j = 0; j < a.cols(); ++j) out << a(i, j) << " ";
      out << y(i) << "\n";
    }
  }
  const std::string cmd = std::string(FLUXTRIM_PYTHON) + " " +
                          FLUXTRIM_SOURCE_DIR +
                          "/tests/reference/numpy_lstsq.py " + path;
  const test_support::CommandResult run = test_support::RunCommand(cmd);
  EXPECT_EQ(run.code, 0) << cmd;
  std::remove(path);
  Reference ref;
  std::istringstream lines(run.output);
  std::string line;
  auto parse = [](const std::string& l) {
    std::istringstream in(l);
    std::vector<double> v;
    double d;
    while (in >> d) v.push_back(d);
    return v;
  };
  std::getline(lines, line);
  ref.x = parse(line);
  for (long i = 0; i < a.cols(); ++i) {
    std::getline(lines, line);
    ref.inverse.push_back(parse(line));
  }
  std::getline(lines, line);
  const auto g = parse(line);
  ref.gcv = g.empty() ? NAN : g[0];
  return ref;
}

// A design with columns over three decades of scale, mild collinearity and
// noise: the shape of an un-equilibrated Tolles-Lawson system.
void MakeProblem(long n, long p, unsigned seed, Eigen::MatrixXd* a,
                 Eigen::VectorXd* y, Eigen::VectorXd* truth) {
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(-1.0, 1.0);
  a->resize(n, p);
  for (long i = 0; i < n; ++i) {
    const double t = 0.1 * static_cast<double>(i);
    for (long j = 0; j < p; ++j) {
      (*a)(i, j) = std::pow(10.0, static_cast<double>(j % 4) - 1.0) *
                   (std::sin(0.37 * (j + 1) * t + j) + 0.3 * u(rng));
    }
  }
  a->col(p - 1) += 0.9 * a->col(0);  // collinearity
  truth->resize(p);
  for (long j = 0; j < p; ++j) (*truth)(j) = u(rng) * 10.0;
  *y = (*a) * (*truth);
  for (long i = 0; i < n; ++i) (*y)(i) += 0.01 * u(rng);
}

double RelativeDifference(const Eigen::VectorXd& x, const std::vector<double>& r) {
  double num = 0, den = 0;
  for (long j = 0; j < x.size(); ++j) {
    num += (x(j) - r[static_cast<std::size_t>(j)]) * (x(j) - r[static_cast<std::size_t>(j)]);
    den += r[static_cast<std::size_t>(j)] * r[static_cast<std::size_t>(j)];
  }
  return std::sqrt(num / den);
}

TEST(LeastSquares, SolutionMatchesNumpyLstsq) {
  if (!PythonHasNumpy()) GTEST_SKIP() << "python3-numpy not installed";
  for (const auto& [n, p] : std::vector<std::pair<long, long>>{{50, 3}, {600, 16}, {2000, 18}}) {
    Eigen::MatrixXd a;
    Eigen::VectorXd y, truth;
    MakeProblem(n, p, static_cast<unsigned>(n + p), &a, &y, &truth);
    const LeastSquaresSummary s = SolveLeastSquares(a, y);
    ASSERT_TRUE(s.usable) << s.message;
    const Reference ref = RunNumpy(a, y, 0.0);
    ASSERT_EQ(ref.x.size(), static_cast<std::size_t>(p));
    EXPECT_LT(RelativeDifference(s.x, ref.x), kRelTol) << "n=" << n << " p=" << p;
  }
}

TEST(LeastSquares, RidgeSolutionAndCovarianceMatchNumpy) {
  if (!PythonHasNumpy()) GTEST_SKIP() << "python3-numpy not installed";
  Eigen::MatrixXd a;
  Eigen::VectorXd y, truth;
  MakeProblem(800, 12, 7u, &a, &y, &truth);
  const double lambda = 1e-3;
  LeastSquaresOptions options;
  options.prior_weights.assign(12, std::sqrt(800 * lambda));
  const LeastSquaresSummary s = SolveLeastSquares(a, y, options);
  ASSERT_TRUE(s.usable) << s.message;
  ASSERT_TRUE(s.covariance_ok);
  const Reference ref = RunNumpy(a, y, lambda);
  EXPECT_LT(RelativeDifference(s.x, ref.x), kRelTol);
  // (J^T J)^{-1} from ceres::Covariance vs numpy.linalg.inv(A^T A + n l I).
  for (long i = 0; i < 12; ++i) {
    for (long j = 0; j < 12; ++j) {
      const double r = ref.inverse[static_cast<std::size_t>(i)][static_cast<std::size_t>(j)];
      EXPECT_NEAR(s.covariance(i, j), r,
                  kRelTol * std::sqrt(std::fabs(ref.inverse[static_cast<std::size_t>(i)][static_cast<std::size_t>(i)] *
                                                ref.inverse[static_cast<std::size_t>(j)][static_cast<std::size_t>(j)])))
          << i << "," << j;
    }
  }
}

TEST(LeastSquares, GcvScoreMatchesExplicitHatMatrix) {
  if (!PythonHasNumpy()) GTEST_SKIP() << "python3-numpy not installed";
  Eigen::MatrixXd a;
  Eigen::VectorXd y, truth;
  MakeProblem(300, 8, 11u, &a, &y, &truth);
  const CompressedSystem s = Compress(a, y);
  const SvdAnalysis svd = AnalyseSystem(s);
  for (double lambda : {1e-6, 1e-3, 0.1}) {
    const Reference ref = RunNumpy(a, y, lambda);
    const double ours = GcvScore(svd, s, lambda, 300.0);
    EXPECT_NEAR(ours, ref.gcv, 1e-9 * ref.gcv) << "lambda " << lambda;
  }
}

TEST(LeastSquares, CompressedDesignGivesTheSameSystemAsCompress) {
  Eigen::MatrixXd a;
  Eigen::VectorXd y, truth;
  MakeProblem(400, 6, 3u, &a, &y, &truth);
  const CompressedSystem direct = Compress(a, y);
  const CompressedSystem reused = CompressedDesign(a).Compress(y);
  // Same Householder sequence: identical up to rounding (1e-12 relative of
  // norms of order 1e2).
  EXPECT_LT((direct.r - reused.r).norm(), 1e-12 * direct.r.norm());
  EXPECT_LT((direct.z - reused.z).norm(), 1e-12 * direct.z.norm());
  EXPECT_NEAR(direct.outside_sum_squares, reused.outside_sum_squares,
              1e-10 * direct.y_sum_squares);
}

// DesignCompressor's reference is the Householder compression above (itself
// checked against NumPy): R is unique up to the signs of its rows, so R^T R,
// R^T z and the outside part are compared. Semi-normal equations lose about
// cond^2 * eps relative (Bjorck 1996, sec. 2.2.4): with cond ~ 10 that is
// ~1e-14; 1e-11 leaves margin for the sums over 5000 rows.
constexpr double kSemiNormalRelTol = 1e-11;

void RandomDesign(long n, long p, unsigned seed, Eigen::MatrixXd* a,
                  Eigen::VectorXd* y) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  *a = Eigen::MatrixXd(n, p);
  *y = Eigen::VectorXd(n);
  for (long i = 0; i < n; ++i) {
    for (long j = 0; j < p; ++j) (*a)(i, j) = g(rng);
    (*y)(i) = g(rng);
  }
  *y += *a * Eigen::VectorXd::LinSpaced(p, -2.0, 3.0);
}

void ExpectSameSystem(const CompressedSystem& ours, const CompressedSystem& ref,
                      double tol) {
  const Eigen::MatrixXd g_ours = ours.r.transpose() * ours.r;
  const Eigen::MatrixXd g_ref = ref.r.transpose() * ref.r;
  EXPECT_LT((g_ours - g_ref).norm(), tol * g_ref.norm());
  const Eigen::VectorXd h_ours = ours.r.transpose() * ours.z;
  const Eigen::VectorXd h_ref = ref.r.transpose() * ref.z;
  EXPECT_LT((h_ours - h_ref).norm(), tol * h_ref.norm());
  EXPECT_NEAR(ours.outside_sum_squares, ref.outside_sum_squares,
              tol * ref.outside_sum_squares);
  EXPECT_EQ(ours.rows, ref.rows);
  EXPECT_DOUBLE_EQ(ours.y_sum_squares, ref.y_sum_squares);
}

TEST(LeastSquares, SemiNormalCompressionOfAWellConditionedDesignEqualsHouseholder) {
  Eigen::MatrixXd a;
  Eigen::VectorXd y;
  RandomDesign(5000, 8, 11u, &a, &y);
  const DesignCompressor compressor(a);
  EXPECT_TRUE(compressor.semi_normal());
  ExpectSameSystem(compressor.Compress(y), CompressedDesign(a).Compress(y),
                   kSemiNormalRelTol);
}

TEST(LeastSquares, IllConditionedDesignFallsBackToHouseholderExactly) {
  Eigen::MatrixXd a;
  Eigen::VectorXd y;
  RandomDesign(3000, 6, 12u, &a, &y);
  a.col(5) = a.col(4) + 1e-6 * a.col(0);  // cond ~1e6 > 1e3
  const DesignCompressor compressor(a);
  EXPECT_FALSE(compressor.semi_normal());
  const CompressedSystem ours = compressor.Compress(y);
  const CompressedSystem ref = CompressedDesign(a).Compress(y);
  EXPECT_EQ(ours.r, ref.r);
  EXPECT_EQ(ours.z, ref.z);
  EXPECT_EQ(ours.outside_sum_squares, ref.outside_sum_squares);
}

TEST(LeastSquares, ZeroColumnsGetZeroRowsAndTheRestMatchesTheSubset) {
  Eigen::MatrixXd a;
  Eigen::VectorXd y;
  RandomDesign(4000, 5, 13u, &a, &y);
  a.col(2).setZero();  // e.g. a term held as not excited
  const DesignCompressor compressor(a);
  EXPECT_TRUE(compressor.semi_normal());
  const CompressedSystem ours = compressor.Compress(y);
  EXPECT_EQ(ours.r.row(2).norm(), 0.0);
  EXPECT_EQ(ours.r.col(2).norm(), 0.0);
  EXPECT_EQ(ours.z(2), 0.0);
  const std::vector<int> kept = {0, 1, 3, 4};
  Eigen::MatrixXd as(a.rows(), 4);
  for (int j = 0; j < 4; ++j) as.col(j) = a.col(kept[static_cast<std::size_t>(j)]);
  ExpectSameSystem(SubSystem(ours, kept), Compress(as, y), kSemiNormalRelTol);
}

TEST(LeastSquares, SubSystemEqualsCompressingTheColumnSubset) {
  Eigen::MatrixXd a;
  Eigen::VectorXd y, truth;
  MakeProblem(500, 7, 5u, &a, &y, &truth);
  const std::vector<int> cols = {0, 2, 5, 6};
  Eigen::MatrixXd as(500, 4);
  for (int j = 0; j < 4; ++j) as.col(j) = a.col(cols[static_cast<std::size_t>(j)]);
  const LeastSquaresSummary direct = SolveLeastSquares(as, y);
  const LeastSquaresSummary via = SolveLeastSquares(SubSystem(Compress(a, y), cols));
  ASSERT_TRUE(direct.usable && via.usable);
  // Least-squares residuals agree to rounding (the minimiser is unique).
  EXPECT_LT((direct.x - via.x).norm(), 1e-9 * direct.x.norm());
  EXPECT_NEAR(direct.data_sum_squares, via.data_sum_squares,
              1e-9 * direct.data_sum_squares);
}

TEST(LeastSquares, HeldTermStaysAtZeroAndOthersAbsorbNothingSpurious) {
  // Exactly collinear pair: columns 0 and 1 identical. Holding column 1
  // puts the whole effect on column 0.
  const long n = 200;
  Eigen::MatrixXd a(n, 3);
  Eigen::VectorXd y(n);
  for (long i = 0; i < n; ++i) {
    const double t = 0.05 * static_cast<double>(i);
    a(i, 0) = std::sin(t);
    a(i, 1) = std::sin(t);
    a(i, 2) = std::cos(2 * t);
    y(i) = 3 * a(i, 0) + 2 * a(i, 1) - a(i, 2);
  }
  LeastSquaresOptions options;
  options.prior_weights = {0.0, 1e3 * std::sqrt(static_cast<double>(n)), 0.0};
  const LeastSquaresSummary s = SolveLeastSquares(a, y, options);
  ASSERT_TRUE(s.usable);
  // Prior weight^2 = 1e6 n against a data curvature ~n/2: the held value
  // is ~1e-6 of the 5 it would otherwise share.
  EXPECT_NEAR(s.x(1), 0.0, 1e-5);
  EXPECT_NEAR(s.x(0), 5.0, 1e-5);
  EXPECT_NEAR(s.x(2), -1.0, 1e-9);
}

TEST(LeastSquares, GcvPicksLargeRidgeForPureNoiseAndSmallForStrongSignal) {
  // GCV (Golub, Heath & Wahba 1979) prefers to keep a direction whose data
  // component is far above the noise and to damp one that is pure noise.
  std::mt19937_64 rng(9);
  std::normal_distribution<double> noise(0.0, 1.0);
  const long n = 2000;
  Eigen::MatrixXd a(n, 4);
  for (long i = 0; i < n; ++i) {
    for (long j = 0; j < 4; ++j) a(i, j) = noise(rng);
  }
  Eigen::VectorXd signal = a * Eigen::Vector4d(5, -3, 2, 1);
  Eigen::VectorXd pure(n);
  for (long i = 0; i < n; ++i) pure(i) = noise(rng);
  const GcvResult strong = ChooseRidgeByGcv(Compress(a, signal + 0.01 * pure));
  const GcvResult weak = ChooseRidgeByGcv(Compress(a, pure));
  EXPECT_LT(strong.lambda, 1e-4);
  EXPECT_GT(weak.lambda, 1e-3);
}

TEST(LeastSquares, InvalidOptionsAreReportedNotSolved) {
  Eigen::MatrixXd a = Eigen::MatrixXd::Identity(3, 3);
  Eigen::VectorXd y = Eigen::VectorXd::Ones(3);
  LeastSquaresOptions options;
  options.prior_weights = {1.0, -1.0, 0.0};
  const LeastSquaresSummary s = SolveLeastSquares(a, y, options);
  EXPECT_FALSE(s.usable);
  EXPECT_NE(s.message.find("prior"), std::string::npos);
  const LeastSquaresSummary wide = SolveLeastSquares(Eigen::MatrixXd::Ones(2, 3),
                                                     Eigen::VectorXd::Ones(2));
  EXPECT_FALSE(wide.usable);
}

}  // namespace
}  // namespace fluxtrim::core
