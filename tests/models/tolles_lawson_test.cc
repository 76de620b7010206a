// Tolles-Lawson term builder and the streaming TermEngine.
#include "models/tolles_lawson.h"

#include <cmath>
#include <limits>
#include <stdexcept>
#include <string>
#include <vector>

#include <Eigen/Dense>
#include <gtest/gtest.h>

#include "src/core/butterworth.h"
#include "src/core/scenario.h"
#include "tests/core/fit_test_util.h"

namespace fluxtrim::models {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

TEST(TermSet, NamesAndCountsFollowTheDocumentedOrder) {
  TermOptions d;
  const std::vector<std::string> names = TermNames(d);
  ASSERT_EQ(names.size(), 16u);
  EXPECT_EQ(TermCount(d), 16u);
  const std::vector<std::string> expected = {
      "perm_x", "perm_y", "perm_z", "ind_xx", "ind_xy", "ind_xz",
      "ind_yy", "ind_yz", "eddy_xx", "eddy_xy", "eddy_xz", "eddy_yx",
      "eddy_yy", "eddy_yz", "eddy_zx", "eddy_zy"};
  EXPECT_EQ(names, expected);
  TermOptions full = ParseTermSet("full");
  EXPECT_EQ(TermCount(full), 18u);
  EXPECT_EQ(TermNames(full)[8], "ind_zz");
  EXPECT_EQ(TermNames(full).back(), "eddy_zz");
  TermOptions pi = ParseTermSet("permanent,induced");
  EXPECT_EQ(TermCount(pi), 8u);
  EXPECT_EQ(TermSetName(pi), "permanent,induced");
  pi.aux = {"i_motor"};
  EXPECT_EQ(TermCount(pi), 11u);
  EXPECT_EQ(TermNames(pi).back(), "aux_i_motor_z");
  EXPECT_EQ(TermCount(ParseTermSet("permanent")), 3u);
  EXPECT_EQ(TermSetName(ParseTermSet("default")), "default");
  EXPECT_THROW(ParseTermSet("permanent,magic"), std::invalid_argument);
}

TEST(TermSet, RowHoldsTheDocumentedProducts) {
  TermOptions o = ParseTermSet("full");
  o.aux = {"i"};
  const double c[3] = {0.6, 0.0, 0.8};
  const double dc[3] = {0.01, -0.02, 0.03};
  const double bt = 50000.0, aux = 2.0;
  std::vector<double> row(TermCount(o));
  FillTermRow(o, c, dc, bt, &aux, row.data());
  EXPECT_DOUBLE_EQ(row[0], 0.6);                   // perm_x = c_x
  EXPECT_DOUBLE_EQ(row[5], bt * 0.6 * 0.8);        // ind_xz = Bt c_x c_z
  EXPECT_DOUBLE_EQ(row[8], bt * 0.8 * 0.8);        // ind_zz
  EXPECT_DOUBLE_EQ(row[10], bt * 0.6 * -0.02);     // eddy_xy = Bt c_x c'_y
  EXPECT_DOUBLE_EQ(row[17], bt * 0.8 * 0.03);      // eddy_zz
  EXPECT_DOUBLE_EQ(row[18], 0.6 * 2.0);            // aux_i_x = c_x a
}

TEST(Derivative, WeightsAreExactOnALinearRamp) {
  // Savitzky & Golay (1964): the least-squares slope through 2k+1 equally
  // spaced samples reproduces the slope of a line exactly.
  for (int k : {1, 2, 5, 20}) {
    const double dt = 0.01;
    double slope = 0, sum = 0;
    for (int j = -k; j <= k; ++j) {
      const double x = 3.0 + 2.5 * j * dt;  // slope 2.5 per second
      slope += DerivativeWeight(k, j, dt) * x;
      sum += DerivativeWeight(k, j, dt);
    }
    EXPECT_NEAR(slope, 2.5, 1e-12) << k;  // rounding of ~2k+1 terms
    EXPECT_NEAR(sum, 0.0, 1e-12) << k;
  }
}

// Unit field whose x direction cosine is an exact linear ramp:
// c = (a t, 0, sqrt(1 - (a t)^2)), scaled to 50,000 nT.
void RampField(double t, double* b) {
  const double cx = 0.1 + 0.02 * t;
  b[0] = 50000.0 * cx;
  b[1] = 0.0;
  b[2] = 50000.0 * std::sqrt(1.0 - cx * cx);
}

TEST(TermEngine, DerivativeOfALinearDirectionCosineIsExact) {
  TermEngine::Options o;
  o.half_width = 3;
  o.sample_rate_hz = 10.0;
  const std::size_t n = 50;
  std::vector<double> t(n), bx(n), by(n), bz(n);
  for (std::size_t i = 0; i < n; ++i) {
    t[i] = 0.1 * static_cast<double>(i);
    double b[3];
    RampField(t[i], b);
    bx[i] = b[0];
    by[i] = b[1];
    bz[i] = b[2];
  }
  const TermMatrix m = BuildTermMatrix(o, n, t.data(), bx.data(), by.data(), bz.data(), nullptr, {});
  // eddy_xx = Bt c_x c'_x with c'_x = 0.02 / s exactly (column 8).
  for (std::size_t i = 3; i + 3 < n; ++i) {
    const double cx = 0.1 + 0.02 * t[i];
    EXPECT_NEAR(m.values[i * m.cols + 8], m.bt[i] * cx * 0.02, 1e-9) << i;
  }
}

TEST(TermEngine, EdgeRuleAtStartGapAndEnd) {
  TermEngine::Options o;
  o.half_width = 2;
  o.sample_rate_hz = 10.0;
  const std::size_t n = 30;
  std::vector<double> t(n), bx(n), by(n), bz(n);
  for (std::size_t i = 0; i < n; ++i) {
    t[i] = 0.1 * static_cast<double>(i) + (i >= 15 ? 1.0 : 0.0);  // gap after 14
    bx[i] = 20000.0 + 10.0 * std::sin(0.3 * static_cast<double>(i));
    by[i] = 1000.0;
    bz[i] = 45000.0;
  }
  bz[22] = kNaN;  // a bad sample in the second segment
  const TermMatrix m = BuildTermMatrix(o, n, t.data(), bx.data(), by.data(), bz.data(), nullptr, {});
  auto invalid = [&](std::size_t i) { return (m.flags[i] & kFlagDerivativeInvalid) != 0; };
  auto edge = [&](std::size_t i) { return (m.flags[i] & kFlagGapEdge) != 0; };
  // Segment 0..14: positions < k or >= L - k have no derivative.
  for (std::size_t i : {0u, 1u, 13u, 14u}) EXPECT_TRUE(invalid(i)) << i;
  for (std::size_t i = 2; i <= 12; ++i) EXPECT_FALSE(invalid(i)) << i;
  EXPECT_TRUE(edge(14));  // last before the gap
  EXPECT_TRUE(edge(15));  // first after the gap
  EXPECT_FALSE(edge(0));
  // Segment 15..21 (bad sample at 22), then 23..29.
  for (std::size_t i : {15u, 16u, 20u, 21u, 23u, 24u, 28u, 29u}) EXPECT_TRUE(invalid(i)) << i;
  for (std::size_t i : {17u, 18u, 19u, 25u, 26u}) EXPECT_FALSE(invalid(i)) << i;
  EXPECT_TRUE(m.flags[22] & kFlagBadSample);
  EXPECT_TRUE(std::isnan(m.values[22 * m.cols]));
  // An invalid derivative means c' = 0: every eddy column is 0 there.
  for (std::size_t c = 8; c < 16; ++c) EXPECT_EQ(m.values[0 * m.cols + c], 0.0);
}

TEST(TermEngine, StreamingEqualsBatchSampleForSample) {
  TermEngine::Options o;
  o.terms.aux = {"i"};
  o.half_width = 2;
  o.sample_rate_hz = 10.0;
  const std::size_t n = 200;
  std::vector<double> t(n), bx(n), by(n), bz(n), f(n), a(n);
  for (std::size_t i = 0; i < n; ++i) {
    const double s = static_cast<double>(i);
    t[i] = 0.1 * s + (i >= 120 ? 0.5 : 0.0);
    bx[i] = 20000.0 + 300.0 * std::sin(0.05 * s);
    by[i] = 500.0 * std::cos(0.07 * s);
    bz[i] = 45000.0 + 100.0 * std::sin(0.11 * s);
    f[i] = std::sqrt(bx[i] * bx[i] + by[i] * by[i] + bz[i] * bz[i]) + 3.0;
    a[i] = 10.0 + std::sin(0.2 * s);
  }
  const std::vector<double> coef(TermCount(o.terms), 0.5);
  const TermMatrix batch = BuildTermMatrix(o, n, t.data(), bx.data(), by.data(),
                                           bz.data(), f.data(), {a.data()}, coef.data());
  TermEngine engine(o);
  engine.SetCoefficients(coef.data());
  std::vector<TermEngine::Output> out(static_cast<std::size_t>(engine.max_outputs()));
  std::size_t seen = 0;
  auto check = [&](const TermEngine::Output& e) {
    const std::size_t i = static_cast<std::size_t>(e.index);
    EXPECT_EQ(i, seen++);  // in order
    EXPECT_EQ(e.flags, batch.flags[i]);
    EXPECT_EQ(e.interference, batch.interference[i]);
    for (std::size_t c = 0; c < batch.cols; ++c) {
      EXPECT_EQ(e.row[c], batch.values[i * batch.cols + c]) << i << "," << c;
    }
  };
  for (std::size_t i = 0; i < n; ++i) {
    const double b[3] = {bx[i], by[i], bz[i]};
    const int k = engine.Push(t[i], b, f[i], &a[i], out.data());
    for (int r = 0; r < k; ++r) check(out[static_cast<std::size_t>(r)]);
  }
  const int k = engine.Flush(out.data());
  for (int r = 0; r < k; ++r) check(out[static_cast<std::size_t>(r)]);
  EXPECT_EQ(seen, n);
}

// Relative singular values of the band-passed, column-normalised term
// matrix of a simulated flight.
Eigen::VectorXd RelativeSingularValues(const io::Table& rec, const TermOptions& terms,
                                       int half_width, double rate_hz) {
  TermEngine::Options o;
  o.terms = terms;
  o.half_width = half_width;
  o.sample_rate_hz = rate_hz;
  const std::size_t n = rec.rows();
  const TermMatrix m = BuildTermMatrix(o, n, rec.Column("time").data(),
                                       rec.Column("bx").data(), rec.Column("by").data(),
                                       rec.Column("bz").data(), rec.Column("f").data(), {});
  const std::size_t k = static_cast<std::size_t>(half_width);
  const core::BandPass bp({}, rate_hz);
  Eigen::MatrixXd a(static_cast<long>(n - 2 * k), static_cast<long>(m.cols));
  std::vector<double> col(n - 2 * k);
  for (std::size_t j = 0; j < m.cols; ++j) {
    for (std::size_t i = k; i < n - k; ++i) col[i - k] = m.values[i * m.cols + j];
    const std::vector<double> band = bp.Filter(col);
    for (std::size_t i = 0; i < band.size(); ++i) a(static_cast<long>(i), static_cast<long>(j)) = band[i];
    a.col(static_cast<long>(j)).normalize();
  }
  const Eigen::MatrixXd r = Eigen::HouseholderQR<Eigen::MatrixXd>(a)
                                .matrixQR()
                                .topRows(a.cols())
                                .triangularView<Eigen::Upper>();
  const Eigen::VectorXd s = Eigen::JacobiSVD<Eigen::MatrixXd>(r).singularValues();
  return s / s(0);
}

TEST(TermMatrix, EighteenTermsHaveNumericalRankSixteenAndSixteenAreFullRank) {
  // Identities sum c_i^2 = 1 and sum c_i c'_i = 0 (Tolles & Lawson 1950;
  // Leliak 1961) make two of the 18 columns redundant. On a simulated
  // compensation box at 100 Hz with k = 1 they hold up to (a) the
  // band-passed variation of Bt itself against the Bt-scaled columns (tens
  // of nT of interference and geology in 57,000 nT: ~1e-6) and (b) the
  // derivative operator's error (dt^2/2)(sum j^4/sum j^2) c'.c'' (~1e-5 of
  // the eddy columns for k = 1 at 100 Hz). kTolerance lies a decade above
  // both and 50 times below the smallest singular value a box gives the
  // 16-term set (~1e-2, measured: 9.8e-3).
  constexpr double kTolerance = 1e-4;
  core::testing::BoxScenario s;
  s.rate_hz = 100.0;
  const core::SimulatedFlight flight =
      core::SimulateScenarioText(core::testing::AircraftBoxText(s), "box100");
  const Eigen::VectorXd full =
      RelativeSingularValues(flight.recording, ParseTermSet("full"), 1, 100.0);
  const Eigen::VectorXd def =
      RelativeSingularValues(flight.recording, ParseTermSet("default"), 1, 100.0);
  int rank18 = 0, rank16 = 0;
  for (long i = 0; i < full.size(); ++i) rank18 += full(i) > kTolerance ? 1 : 0;
  for (long i = 0; i < def.size(); ++i) rank16 += def(i) > kTolerance ? 1 : 0;
  EXPECT_EQ(rank18, 16) << full.transpose();
  EXPECT_EQ(rank16, 16) << def.transpose();
  EXPECT_GT(def(def.size() - 1), 50 * kTolerance);
}

}  // namespace
}  // namespace fluxtrim::models
