#include "src/core/fit.h"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <ctime>
#include <future>
#include <memory>
#include <numeric>
#include <sstream>
#include <stdexcept>

#include <Eigen/Core>
#include <Eigen/QR>
#include <ceres/ceres.h>
#include <ceres/cubic_interpolation.h>


#include "io/error.h"
#include "models/huge_pages.h"
#include "src/core/lag.h"
#include "src/core/least_squares.h"
#include "src/core/metrics.h"
#include "src/core/ridge.h"

namespace fluxtrim::core {

using models::AdviseHugePages;
using models::HugeAssign;
using models::HugeVector;
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// A held term is fixed at 0 in the solve (an infinitely strong prior,
// ceres::SubsetManifold); fit.h has the criteria of a determined term.
// Weight of the gauge constraints of the 18-term set, relative to sqrt(n).
constexpr double kConstraintWeight = 1e3;

// Tuning constants for 95% efficiency under Gaussian noise (common
// practice: Huber 1981; Holland & Welsch 1977) and the MAD-to-sigma factor
// 1/Phi^{-1}(3/4) = 1.4826 for Gaussian data (common practice).
constexpr double kHuberTuning = 1.345;
constexpr double kCauchyTuning = 2.385;
constexpr double kMadToSigma = 1.4826;

// Stage timing on stderr when FLUXTRIM_FIT_PROFILE is set (development).
class StageClock {
 public:
  StageClock() : on_(std::getenv("FLUXTRIM_FIT_PROFILE") != nullptr),
                 last_(std::chrono::steady_clock::now()), cpu_(std::clock()) {}
  void Mark(const char* stage) {
    if (!on_) return;
    const auto now = std::chrono::steady_clock::now();
    const std::clock_t cpu = std::clock();
    std::fprintf(stderr, "fit profile: %-14s wall %8.1f ms  cpu %8.1f ms\n", stage,
                 std::chrono::duration<double, std::milli>(now - last_).count(),
                 1000.0 * static_cast<double>(cpu - cpu_) / CLOCKS_PER_SEC);
    last_ = now;
    cpu_ = cpu;
  }

 private:
  bool on_;
  std::chrono::steady_clock::time_point last_;
  std::clock_t cpu_;
};

double Median(std::vector<double> v) {
  if (v.empty()) return kNaN;
  const std::size_t m = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<long>(m), v.end());
  double med = v[m];
  if (v.size() % 2 == 0) {
    med = (med + *std::max_element(v.begin(), v.begin() + static_cast<long>(m))) / 2;
  }
  return med;
}

double CircularDistanceDeg(double a, double b) {
  double d = std::fmod(std::fabs(a - b), 360.0);
  return d > 180.0 ? 360.0 - d : d;
}

std::string Fixed(double v, int digits) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, "%.*f", digits, v);
  return buffer;
}
std::string Sci(double v) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, "%.3g", v);
  return buffer;
}

// A filtered run: derivative-valid samples [begin, end) of a contiguous run
// of good samples; rows [fit_begin, fit_end) are fitted.
struct Run {
  std::size_t begin = 0, end = 0;
  std::size_t fit_begin = 0, fit_end = 0;
};

// Everything the steps share.
struct Work {
  std::size_t n = 0, p = 0;
  double rate = 0;
  int k = 1;
  const std::vector<double>* time = nullptr;  // the recording's column
  models::TermMatrix tm;
  std::vector<double> field;          // measured field (f or |B|), raw
  bool scalar = false;                // field is the scalar sensor
  std::vector<Run> runs;
  std::vector<std::size_t> fit_rows;  // sample index of each fitted row
  std::vector<int> fit_run;           // run of each fitted row
  Eigen::MatrixXd a;                  // fitted rows x p, band-passed, equilibrated
  Eigen::VectorXd scale;              // band RMS of each column
  std::vector<bool> unexcited;
  std::vector<std::vector<double>> constraints;  // equilibrated, unit norm
  std::unique_ptr<BandPass> band;
  double noise_gain = 1;
  std::vector<double> bound;          // plausible |coefficient|, physical
};

// Band-passes x over each run; returns the full-length series (NaN outside
// runs).
std::vector<double> BandPassRuns(const Work& w, const std::vector<double>& x) {
  std::vector<double> out = HugeVector(w.n, kNaN);
  for (const Run& run : w.runs) {
    w.band->Filter(x.data() + run.begin, run.end - run.begin,
                   out.data() + run.begin);
  }
  return out;
}

Eigen::VectorXd AtFitRows(const Work& w, const std::vector<double>& full) {
  Eigen::VectorXd y(static_cast<long>(w.fit_rows.size()));
  for (std::size_t r = 0; r < w.fit_rows.size(); ++r) {
    y(static_cast<long>(r)) = full[w.fit_rows[r]];
  }
  return y;
}

// Adds the gauge constraints as weighted pseudo-observations to a
// compressed system (recompressing the (p + c) x p stack).
// Gauge constraints still needed: one whose terms include a held one is
// already fixed by the hold.
std::vector<std::vector<double>> ActiveConstraints(const Work& w,
                                                  const std::vector<bool>& held) {
  std::vector<std::vector<double>> active;
  for (const auto& g : w.constraints) {
    bool touches_held = false;
    for (std::size_t j = 0; j < g.size(); ++j) {
      touches_held = touches_held || (g[j] != 0.0 && held[j]);
    }
    if (!touches_held) active.push_back(g);
  }
  return active;
}

CompressedSystem Augment(const CompressedSystem& s, const Work& w,
                         const std::vector<bool>& held) {
  const std::vector<std::vector<double>> constraints = ActiveConstraints(w, held);
  if (constraints.empty()) return s;
  const long p = s.r.cols();
  const long c = static_cast<long>(constraints.size());
  Eigen::MatrixXd stack = Eigen::MatrixXd::Zero(p + c, p);
  stack.topRows(p) = s.r;
  const double weight = kConstraintWeight * std::sqrt(static_cast<double>(s.rows));
  for (long i = 0; i < c; ++i) {
    for (long j = 0; j < p; ++j) {
      stack(p + i, j) = weight * constraints[static_cast<std::size_t>(i)][static_cast<std::size_t>(j)];
    }
  }
  Eigen::VectorXd rhs = Eigen::VectorXd::Zero(p + c);
  rhs.head(p) = s.z;
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(stack);
  CompressedSystem out;
  out.rows = s.rows;
  out.y_sum_squares = s.y_sum_squares;
  out.r = qr.matrixQR().topRows(p).triangularView<Eigen::Upper>();
  rhs.applyOnTheLeft(qr.householderQ().transpose());
  out.z = rhs.head(p);
  out.outside_sum_squares = s.outside_sum_squares + rhs.tail(c).squaredNorm();
  return out;
}

struct Solution {
  bool ok = false;
  std::string message;
  Eigen::VectorXd x;           // equilibrated
  Eigen::MatrixXd covariance;  // unscaled (J^T J)^{-1}, equilibrated
  bool covariance_ok = false;
  double rss = 0;              // band-passed residual sum of squares
  double lambda = 0;
  double dof = 0;              // effective number of fitted parameters
  GcvResult gcv;
};

// Solves the (augmented) compressed system with the ridge on free terms and
// the hold prior on held ones. lambda < 0 means: choose by GCV.
Solution SolveWith(const Work& w, const CompressedSystem& augmented,
                   const std::vector<bool>& held, double lambda,
                   bool covariance) {
  Solution s;
  const double n = static_cast<double>(augmented.rows);
  const std::vector<int> free = FreeColumns(held);
  if (free.empty()) {
    s.message = "no term left to fit";
    return s;
  }
  const CompressedSystem sub = SubSystem(augmented, free);
  if (lambda < 0) {
    GcvOptions gcv;
    gcv.effective_rows = n * w.noise_gain;
    s.gcv = ChooseRidgeByGcv(sub, gcv);
    lambda = s.gcv.lambda;
  }
  s.lambda = lambda;
  LeastSquaresOptions options;
  options.prior_weights.assign(w.p, std::sqrt(n * lambda));
  for (std::size_t j = 0; j < w.p; ++j) {
    if (held[j]) {
      options.prior_weights[j] = 0.0;
      options.fixed.push_back(static_cast<int>(j));
    }
  }
  options.compute_covariance = covariance;
  const LeastSquaresSummary ls = SolveLeastSquares(augmented, options);
  s.message = ls.message;
  if (!ls.usable) return s;
  s.x = ls.x;
  s.covariance = ls.covariance;
  s.covariance_ok = ls.covariance_ok;
  s.rss = ls.data_sum_squares;
  // Effective parameters: filter factors of the free terms' directions.
  const SvdAnalysis svd = AnalyseSystem(sub);
  for (long i = 0; i < svd.singular_values.size(); ++i) {
    const double s2 = svd.singular_values(i) * svd.singular_values(i);
    s.dof += s2 / (s2 + lambda);
  }
  s.ok = true;
  return s;
}

// White-noise variance behind a band-passed residual: the band-pass makes
// residuals correlated; sigma_w^2 = sigma_band^2 / sum g_k^2 makes
// sigma_w^2 (A^T A)^{-1} the coefficient covariance when the columns' band
// spectra are flat (see fit.h step 6).
double WhiteVariance(const Work& w, const Solution& s) {
  const double n = static_cast<double>(w.fit_rows.size());
  const double band_var = s.rss / std::max(1.0, n - s.dof);
  return band_var / w.noise_gain;
}

// ----- lag ------------------------------------------------------------

// Band-passed field of every run, interpolated at (position + shift).
class RunInterpolators {
 public:
  RunInterpolators(const Work& w, const std::vector<double>& band_full) {
    for (const Run& run : w.runs) {
      grids_.push_back(std::make_unique<ceres::Grid1D<double>>(
          band_full.data() + run.begin, 0,
          static_cast<int>(run.end - run.begin)));
      interpolators_.push_back(
          std::make_unique<ceres::CubicInterpolator<ceres::Grid1D<double>>>(
              *grids_.back()));
    }
  }
  void Evaluate(int run, double position, double* f, double* dfdx) const {
    interpolators_[static_cast<std::size_t>(run)]->Evaluate(position, f, dfdx);
  }

 private:
  std::vector<std::unique_ptr<ceres::Grid1D<double>>> grids_;
  std::vector<std::unique_ptr<ceres::CubicInterpolator<ceres::Grid1D<double>>>>
      interpolators_;
};

// Rows used by the lag steps: every stride-th fitted row.
struct LagRows {
  std::vector<long> rows;    // into w.fit_rows / w.a
  std::vector<int> run;
  std::vector<double> position;  // sample position within its run
};

LagRows MakeLagRows(const Work& w, std::size_t stride) {
  LagRows out;
  for (std::size_t r = 0; r < w.fit_rows.size(); r += stride) {
    const int run = w.fit_run[r];
    out.rows.push_back(static_cast<long>(r));
    out.run.push_back(run);
    out.position.push_back(static_cast<double>(
        w.fit_rows[r] - w.runs[static_cast<std::size_t>(run)].begin));
  }
  return out;
}

// Joint residuals A_e x - y(position + lag) over the lag rows; parameters x
// (p, equilibrated) and lag (samples).
class JointLagCost : public ceres::CostFunction {
 public:
  JointLagCost(const Eigen::MatrixXd* a, const LagRows* rows,
               const RunInterpolators* y)
      : a_(a), rows_(rows), y_(y) {
    set_num_residuals(static_cast<int>(rows->rows.size()));
    mutable_parameter_block_sizes()->push_back(static_cast<int>(a->cols()));
    mutable_parameter_block_sizes()->push_back(1);
  }
  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override {
    const long p = a_->cols();
    Eigen::Map<const Eigen::VectorXd> x(parameters[0], p);
    const double lag = parameters[1][0];
    const std::size_t m = rows_->rows.size();
    for (std::size_t i = 0; i < m; ++i) {
      const long r = rows_->rows[i];
      double f = 0, dfdx = 0;
      y_->Evaluate(rows_->run[i], rows_->position[i] + lag, &f, &dfdx);
      residuals[i] = a_->row(r).dot(x) - f;
      if (jacobians) {
        if (jacobians[0]) {
          for (long j = 0; j < p; ++j) {
            jacobians[0][static_cast<long>(i) * p + j] = (*a_)(r, j);
          }
        }
        if (jacobians[1]) jacobians[1][i] = -dfdx;
      }
    }
    return true;
  }

 private:
  const Eigen::MatrixXd* a_;
  const LagRows* rows_;
  const RunInterpolators* y_;
};

struct LagResult {
  double lag_samples = 0;
  double std_error_samples = 0;
  bool at_limit = false;
  bool ok = false;
};

// Coarse grid then joint Ceres refinement (see fit.h step 4).
LagResult EstimateLag(const Work& w, const std::vector<double>& band_full,
                      const std::vector<bool>& held, double lambda,
                      double max_lag_samples) {
  LagResult out;
  const RunInterpolators y(w, band_full);
  const long p = static_cast<long>(w.p);
  // Coarse: rows decimated to about 5 Hz (the band ends at ~1 Hz, so the
  // residual as a function of lag is smooth on that scale), a grid step of
  // 0.05 s, and the residual of the projection on the free columns.
  const std::size_t stride =
      std::max<std::size_t>(1, static_cast<std::size_t>(w.rate / 5.0));
  const LagRows coarse = MakeLagRows(w, stride);
  const std::vector<int> free = FreeColumns(held);
  const long m = static_cast<long>(coarse.rows.size());
  if (m <= static_cast<long>(free.size()) + 2 || free.empty()) return out;
  Eigen::MatrixXd ad(m, static_cast<long>(free.size()));
  for (long i = 0; i < m; ++i) {
    for (std::size_t j = 0; j < free.size(); ++j) {
      ad(i, static_cast<long>(j)) = w.a(coarse.rows[static_cast<std::size_t>(i)], free[j]);
    }
  }
  const DesignCompressor design(ad);
  const double step = std::max(1e-3, 0.05 * w.rate);
  const int half = static_cast<int>(std::ceil(max_lag_samples / step));
  double best_rss = std::numeric_limits<double>::infinity();
  int best = 0;
  Eigen::VectorXd yl(m);
  for (int g = -half; g <= half; ++g) {
    const double lag = std::clamp(g * step, -max_lag_samples, max_lag_samples);
    for (long i = 0; i < m; ++i) {
      const std::size_t u = static_cast<std::size_t>(i);
      y.Evaluate(coarse.run[u], coarse.position[u] + lag, &yl(i), nullptr);
    }
    const CompressedSystem s = design.Compress(yl);
    const double rss = s.outside_sum_squares;
    if (rss < best_rss) {
      best_rss = rss;
      best = g;
    }
  }
  double lag0 = std::clamp(best * step, -max_lag_samples, max_lag_samples);
  StageClock clock;

  // Joint refinement of coefficients and lag in Ceres over at most 5,000
  // rows (every refine_stride-th: the band-passed field is smooth on the
  // scale of the stride; 5,000 rows of a 0.8 Hz band hold far more
  // independent samples than one lag needs).
  const std::size_t refine_stride = std::max<std::size_t>(
      1, (w.fit_rows.size() + 4999) / 5000);
  const LagRows rows = MakeLagRows(w, refine_stride);
  Eigen::VectorXd x = Eigen::VectorXd::Zero(p);
  double lag = lag0;
  ceres::Problem problem;
  problem.AddResidualBlock(new JointLagCost(&w.a, &rows, &y), nullptr,
                           x.data(), &lag);
  const double n = static_cast<double>(rows.rows.size());
  {
    const std::vector<std::vector<double>> constraints = ActiveConstraints(w, held);
    const long c = static_cast<long>(constraints.size());
    Eigen::MatrixXd g = Eigen::MatrixXd::Zero(p + c, p);
    for (long j = 0; j < p; ++j) {
      g(j, j) = held[static_cast<std::size_t>(j)] ? 0.0 : std::sqrt(n * lambda);
    }
    for (long i = 0; i < c; ++i) {
      for (long j = 0; j < p; ++j) {
        g(p + i, j) = kConstraintWeight * std::sqrt(n) *
                      constraints[static_cast<std::size_t>(i)][static_cast<std::size_t>(j)];
      }
    }
    problem.AddResidualBlock(NewLinearPriorCost(std::move(g)), nullptr, x.data());
  }
  {
    std::vector<int> fixed;
    for (long j = 0; j < p; ++j) {
      if (held[static_cast<std::size_t>(j)]) fixed.push_back(static_cast<int>(j));
    }
    if (!fixed.empty()) {
      problem.SetManifold(x.data(), new ceres::SubsetManifold(static_cast<int>(p), fixed));
    }
  }
  problem.SetParameterLowerBound(&lag, 0, -max_lag_samples - 1);
  problem.SetParameterUpperBound(&lag, 0, max_lag_samples + 1);
  ceres::Solver::Options options;
  // Normal equations of the (rows x p+1) Jacobian: a few times cheaper than
  // its QR, and sound here (equilibrated columns, condition ~1e2; each
  // Gauss-Newton step is re-evaluated against the exact residual).
  options.linear_solver_type = ceres::DENSE_NORMAL_CHOLESKY;
  options.max_num_iterations = 50;
  options.function_tolerance = 1e-12;
  options.parameter_tolerance = 1e-10;
  options.logging_type = ceres::SILENT;
  options.num_threads = 1;
  ceres::Solver::Summary summary;
  ceres::Solve(options, &problem, &summary);
  if (!summary.IsSolutionUsable() || !std::isfinite(lag)) {
    out.lag_samples = lag0;
    out.ok = true;
    out.at_limit = std::fabs(lag0) >= max_lag_samples - 1e-9;
    return out;
  }
  clock.Mark("lag refine");
  out.lag_samples = lag;
  out.at_limit = std::fabs(lag) >= max_lag_samples - 0.5 * step;
  out.ok = true;
  // Standard error: covariance of the joint problem scaled by the residual
  // variance; rows are every refine_stride-th sample, whose band-passed
  // residuals are correlated over about 1/noise_gain samples.
  ceres::Covariance::Options cov_options;
  cov_options.algorithm_type = ceres::DENSE_SVD;
  cov_options.null_space_rank = -1;
  ceres::Covariance covariance(cov_options);
  std::vector<std::pair<const double*, const double*>> blocks = {{&lag, &lag}};
  if (covariance.Compute(blocks, &problem)) {
    double var = 0;
    if (covariance.GetCovarianceBlock(&lag, &lag, &var)) {
      double rss = 2.0 * summary.final_cost;
      const double band_var = rss / std::max(1.0, n - static_cast<double>(p) - 1);
      const double correlation =
          std::max(1.0, 1.0 / (w.noise_gain * static_cast<double>(refine_stride)));
      out.std_error_samples = std::sqrt(std::max(0.0, var * band_var * correlation));
    }
  }
  return out;
}

// ----- robust loss --------------------------------------------------------

// Residual of each sample against the median of its neighbours within
// +-half samples (the sample itself excluded) in its run. A spike keeps its
// full height; white noise of sigma comes out with about 1.2 sigma (sqrt(3/2)
// for half = 1..2 on smooth data); a smooth signal cancels to its
// curvature. Unlike the residual from a running median that includes the
// sample, it does not vanish on monotonic stretches.
std::vector<double> NeighbourMedianResidual(const Work& w,
                                            const std::vector<double>& x,
                                            std::size_t half) {
  std::vector<double> out(w.n, kNaN);
  std::vector<double> buffer;
  for (const Run& run : w.runs) {
    for (std::size_t i = run.begin; i < run.end; ++i) {
      const std::size_t b = i >= run.begin + half ? i - half : run.begin;
      const std::size_t e = std::min(run.end, i + half + 1);
      buffer.clear();
      for (std::size_t q = b; q < e; ++q) {
        if (q != i) buffer.push_back(x[q]);
      }
      if (buffer.empty()) {
        out[i] = 0.0;
        continue;
      }
      out[i] = x[i] - Median(buffer);
    }
  }
  return out;
}

// ----- helpers ------------------------------------------------------------

double PlausibleBound(const std::string& name, const Work& w,
                      const std::vector<double>& aux_rms, std::size_t j,
                      std::size_t aux_first) {
  if (name.rfind("perm_", 0) == 0) return kMaxPermanentNT;
  if (name.rfind("ind_", 0) == 0) return kMaxInduced;
  if (name.rfind("eddy_", 0) == 0) return kMaxEddyS;
  const std::size_t a = (j - aux_first) / 3;
  const double rms = a < aux_rms.size() ? aux_rms[a] : 0.0;
  (void)w;
  return rms > 0 ? kMaxPermanentNT / rms : std::numeric_limits<double>::infinity();
}

std::string HoldHint(const std::string& name) {
  if (name.rfind("aux_", 0) == 0) {
    return "vary the channel during the maneuvers";
  }
  return "fly pitch, roll and yaw maneuvers at each heading";
}

struct HeadingGroup {
  double heading_deg = 0;
  std::vector<std::size_t> maneuvers;
};

std::vector<HeadingGroup> GroupByHeading(const std::vector<Maneuver>& m) {
  std::vector<HeadingGroup> groups;
  for (std::size_t i = 0; i < m.size(); ++i) {
    bool placed = false;
    for (HeadingGroup& g : groups) {
      if (CircularDistanceDeg(g.heading_deg, m[i].heading_deg) <= 30.0) {
        g.maneuvers.push_back(i);
        placed = true;
        break;
      }
    }
    if (!placed) groups.push_back({m[i].heading_deg, {i}});
  }
  return groups;
}

}  // namespace

const char* RobustLossName(RobustLoss loss) {
  switch (loss) {
    case RobustLoss::kHuber:
      return "huber";
    case RobustLoss::kCauchy:
      return "cauchy";
    case RobustLoss::kNone:
      break;
  }
  return "none";
}

bool ParseRobustLoss(const std::string& text, RobustLoss* loss) {
  if (text == "none") {
    *loss = RobustLoss::kNone;
  } else if (text == "huber") {
    *loss = RobustLoss::kHuber;
  } else if (text == "cauchy") {
    *loss = RobustLoss::kCauchy;
  } else {
    return false;
  }
  return true;
}

bool FitOptions::IsValid(std::string* error) const {
  auto fail = [error](const std::string& what) {
    if (error) *error = what;
    return false;
  };
  if (!band.IsValid(error)) return false;
  if (derivative_half_width < 0) {
    return fail("derivative half-width must be >= 1 samples (0 = automatic)");
  }
  if (!(gap_factor >= 1.0) || !std::isfinite(gap_factor)) {
    return fail("gap factor must be >= 1");
  }
  if (!ridge_auto && (!(ridge >= 0) || !std::isfinite(ridge))) {
    return fail("ridge must be 'auto' or a number >= 0");
  }
  if (!(max_lag_s >= 0) || !std::isfinite(max_lag_s)) {
    return fail("maximum lag must be >= 0 s");
  }
  if (!(edge_trim_s >= 0) || !std::isfinite(edge_trim_s)) {
    return fail("edge trim must be >= 0 s");
  }
  if (!(max_flagged_fraction >= 0 && max_flagged_fraction <= 1)) {
    return fail("maximum flagged fraction must be within [0, 1]");
  }
  if (models::TermCount(terms) == 0) return fail("the term set is empty");
  if (threads < 1) return fail("threads must be >= 1");
  return true;
}

int DefaultDerivativeHalfWidth(double sample_rate_hz) {
  return std::max(1, static_cast<int>(std::lround(0.2 * sample_rate_hz)));
}

double EstimateSampleRate(const std::vector<double>& time,
                          const std::string& source) {
  std::vector<double> steps;
  steps.reserve(time.size());
  for (std::size_t i = 1; i < time.size(); ++i) {
    const double dt = time[i] - time[i - 1];
    if (std::isfinite(dt) && dt > 0) steps.push_back(dt);
  }
  if (steps.size() < 2) {
    throw io::InputError(source, "channel time",
                         "expected increasing times with at least three "
                         "samples to find the sample rate");
  }
  return 1.0 / Median(std::move(steps));
}

std::string TermUnit(const std::string& name) {
  if (name.rfind("perm_", 0) == 0) return "nT";
  if (name.rfind("ind_", 0) == 0) return "1";
  if (name.rfind("eddy_", 0) == 0) return "s";
  return "nT/unit";
}

TermInputs SelectTermInputs(const io::Table& table,
                            const std::vector<std::string>& aux_names) {
  TermInputs in;
  if (table.Has("f")) {
    const auto& fc = table.Column("f");
    if (std::any_of(fc.begin(), fc.end(),
                    [](double v) { return std::isfinite(v); })) {
      in.f = fc.data();
    }
  }
  for (const std::string& name : aux_names) {
    const auto& col = table.Column(name);
    in.aux.push_back(col.data());
    const double rms = FiniteRms(col);
    in.aux_rms.push_back(std::isnan(rms) ? 0.0 : rms);
  }
  return in;
}

FitResult FitModel(const io::Table& table, const FitOptions& options) {
  std::string error;
  if (!options.IsValid(&error)) throw std::invalid_argument(error);
  FitResult result;
  Work w;

  StageClock clock;
  // ---- channels --------------------------------------------------------
  std::vector<std::string> missing;
  for (const char* name : {"time", "bx", "by", "bz"}) {
    if (!table.Has(name)) missing.push_back(name);
  }
  for (const std::string& aux : options.terms.aux) {
    if (!table.Has(aux)) missing.push_back(aux);
  }
  if (!missing.empty()) {
    std::string have;
    for (const auto& c : table.channels()) have += (have.empty() ? "" : ", ") + c.info.name;
    std::string names;
    for (const auto& m : missing) names += (names.empty() ? "" : ", ") + m;
    throw io::InputError(options.source, "channel " + names,
                         "missing; the fit needs time, bx, by, bz (and every "
                         "--aux channel); the recording has: " + have);
  }
  w.n = table.rows();
  w.time = &table.Column("time");
  const auto& bx = table.Column("bx");
  const auto& by = table.Column("by");
  const auto& bz = table.Column("bz");
  const TermInputs inputs = SelectTermInputs(table, options.terms.aux);
  const double* f = inputs.f;
  const std::vector<const double*>& aux = inputs.aux;
  const std::vector<double>& aux_rms = inputs.aux_rms;
  if (table.Has("f") && f == nullptr) {
    result.warnings.push_back(
        "channel f holds no finite value: the fluxgate magnitude |B| is used "
        "as the total field");
  }
  w.scalar = f != nullptr;
  result.field_source = w.scalar ? "f" : "|B|";
  result.samples = w.n;
  result.time.reserve(w.n);
  AdviseHugePages(result.time.data(), w.n * sizeof(double));
  result.time = *w.time;
  if (w.n > 0) {
    result.start_s = w.time->front();
    result.end_s = w.time->back();
  }

  w.rate = EstimateSampleRate(*w.time, options.source);
  w.k = options.derivative_half_width > 0
            ? options.derivative_half_width
            : DefaultDerivativeHalfWidth(w.rate);
  result.engine.terms = options.terms;
  result.engine.half_width = w.k;
  result.engine.sample_rate_hz = w.rate;
  result.engine.gap_factor = options.gap_factor;
  result.term_names = models::TermNames(options.terms);
  w.p = result.term_names.size();
  result.loss = RobustLossName(options.loss);

  w.band = std::make_unique<BandPass>(options.band, w.rate);
  result.band = options.band;
  result.band.high_hz = w.band->high_hz();
  if (w.band->clipped()) {
    result.warnings.push_back("band-pass upper edge clipped to " +
                              Fixed(w.band->high_hz(), 3) +
                              " Hz (below the Nyquist frequency of " +
                              Fixed(w.rate / 2, 3) + " Hz)");
  }
  // Noise gain sum g_k^2 of the zero-phase filter: filter a unit impulse.
  {
    const std::size_t len = std::max<std::size_t>(
        w.band->min_length() + 1,
        static_cast<std::size_t>(40.0 * w.rate / w.band->low_hz()));
    std::vector<double> impulse(len, 0.0);
    impulse[len / 2] = 1.0;
    const std::vector<double> g = w.band->Filter(impulse);
    double s = 0;
    for (double v : g) s += v * v;
    w.noise_gain = s > 0 ? s : 1.0;
    result.noise_gain = w.noise_gain;
  }

  // ---- attitude range --------------------------------------------------
  if (table.Has("roll") && table.Has("pitch")) {
    const auto& roll = table.Column("roll");
    const auto& pitch = table.Column("pitch");
    double rmin = INFINITY, rmax = -INFINITY, pmin = INFINITY, pmax = -INFINITY;
    for (std::size_t i = 0; i < w.n; ++i) {
      if (std::isfinite(roll[i])) {
        rmin = std::min(rmin, roll[i]);
        rmax = std::max(rmax, roll[i]);
      }
      if (std::isfinite(pitch[i])) {
        pmin = std::min(pmin, pitch[i]);
        pmax = std::max(pmax, pitch[i]);
      }
    }
    if (std::isfinite(rmin) && std::isfinite(pmin)) {
      result.attitude_present = true;
      result.roll_min_deg = rmin;
      result.roll_max_deg = rmax;
      result.pitch_min_deg = pmin;
      result.pitch_max_deg = pmax;
    }
  }

  // Maneuver detection needs only the recording: it runs on a second
  // thread (options.threads > 1) while the term matrix is built and
  // filtered; the result is taken before the first solve.
  std::future<ManeuverDetection> detection_job;
  if (!options.maneuvers_given) {
    detection_job = std::async(
        options.threads > 1 ? std::launch::async : std::launch::deferred,
        [&table] { return DetectManeuvers(table); });
  }

  clock.Mark("setup");
  // ---- terms -------------------------------------------------------------
  w.tm = models::BuildTermMatrix(result.engine, w.n, w.time->data(), bx.data(),
                                 by.data(), bz.data(), f, aux);
  w.field = HugeVector(w.n, 0.0);
  for (std::size_t i = 0; i < w.n; ++i) w.field[i] = w.scalar ? f[i] : w.tm.bt[i];

  clock.Mark("terms");
  // ---- segments ------------------------------------------------------------
  std::vector<char> good(w.n, 0);
  std::size_t bad = 0;
  for (std::size_t i = 0; i < w.n; ++i) {
    bool ok = !(w.tm.flags[i] & models::kFlagBadSample) && std::isfinite(w.field[i]);
    for (const double* a : aux) ok = ok && std::isfinite(a[i]);
    good[i] = ok ? 1 : 0;
    if (!ok) ++bad;
  }
  // Samples the nominal rate would have had inside time gaps.
  std::size_t missing_in_gaps = 0;
  for (std::size_t i = 1; i < w.n; ++i) {
    const double dt = (*w.time)[i] - (*w.time)[i - 1];
    if (std::isfinite(dt) && dt > options.gap_factor / w.rate) {
      missing_in_gaps += static_cast<std::size_t>(std::lround(dt * w.rate)) - 1;
    }
  }
  const double flagged_fraction =
      static_cast<double>(bad + missing_in_gaps) /
      static_cast<double>(std::max<std::size_t>(1, w.n + missing_in_gaps));
  if (flagged_fraction > options.max_flagged_fraction) {
    result.message =
        Fixed(100 * flagged_fraction, 1) +
        "% of the samples are missing, in gaps or non-finite (limit " +
        Fixed(100 * options.max_flagged_fraction, 0) +
        "%): repair the recording (check the logger and the sensor "
        "connections) or fly the compensation box again";
    return result;
  }

  const double max_lag_s = (w.scalar && options.estimate_lag) ? options.max_lag_s : 0.0;
  const double trim_s = options.edge_trim_s > 0
                            ? options.edge_trim_s
                            : std::max(0.5 / w.band->low_hz(),
                                       max_lag_s + 2.0 / w.rate);
  const std::size_t trim = static_cast<std::size_t>(std::ceil(trim_s * w.rate));
  std::size_t skipped_runs = 0;
  {
    // Contiguous runs of good samples (the segment rule of ContiguousRuns,
    // lag.h: finite time, step within (0, gap_factor / rate]).
    std::vector<SampleRun> good_runs;
    {
      const std::vector<double>& t = *w.time;
      const double max_step = options.gap_factor / w.rate;
      std::size_t i = 0;
      while (i < w.n) {
        if (!good[i] || !std::isfinite(t[i])) {
          ++i;
          continue;
        }
        SampleRun run;
        run.begin = i++;
        while (i < w.n && good[i] && std::isfinite(t[i])) {
          const double dt = t[i] - t[i - 1];
          if (!(dt > 0) || dt > max_step) break;
          ++i;
        }
        run.end = i;
        good_runs.push_back(run);
      }
    }
    const std::size_t k = static_cast<std::size_t>(w.k);
    for (const SampleRun& r : good_runs) {
      if (r.end - r.begin <= 2 * k) {
        ++skipped_runs;
        continue;
      }
      Run run;
      run.begin = r.begin + k;
      run.end = r.end - k;
      const std::size_t len = run.end - run.begin;
      if (len < w.band->min_length() || len <= 2 * trim + 1) {
        ++skipped_runs;
        continue;
      }
      run.fit_begin = run.begin + trim;
      run.fit_end = run.end - trim;
      w.runs.push_back(run);
    }
  }
  if (skipped_runs > 0) {
    result.warnings.push_back(
        std::to_string(skipped_runs) +
        " stretch(es) between gaps too short to band-pass were skipped");
  }
  for (std::size_t r = 0; r < w.runs.size(); ++r) {
    for (std::size_t i = w.runs[r].fit_begin; i < w.runs[r].fit_end; ++i) {
      w.fit_rows.push_back(i);
      w.fit_run.push_back(static_cast<int>(r));
    }
  }
  const std::size_t n_fit = w.fit_rows.size();
  const double min_duration_s = 5.0 / w.band->low_hz();
  const std::size_t min_rows = std::max<std::size_t>(
      20 * w.p, static_cast<std::size_t>(min_duration_s * w.rate));
  if (n_fit < min_rows) {
    result.message =
        "only " + Fixed(static_cast<double>(n_fit) / w.rate, 1) +
        " s of usable data after filtering (need at least " +
        Fixed(static_cast<double>(min_rows) / w.rate, 1) +
        " s, about five periods of the band's lower edge): fly a longer "
        "compensation box or repair the gaps";
    return result;
  }
  result.samples_used = n_fit;

  clock.Mark("segments");
  // ---- band-passed, equilibrated design ------------------------------------
  {
    const long p = static_cast<long>(w.p);
    w.a.resize(static_cast<long>(n_fit), p);  // allocated, not yet touched
    AdviseHugePages(w.a.data(), static_cast<std::size_t>(w.a.size()) * sizeof(double));
    // All columns of a run in one pass over the row-major term matrix
    // (BandPass::FilterChannels: per column the same arithmetic as Filter).
    long row = 0;
    for (const Run& run : w.runs) {
      w.band->FilterChannels(w.tm.values.data() + run.begin * w.p,
                             run.end - run.begin, w.p, w.p,
                             run.fit_begin - run.begin, run.fit_end - run.begin,
                             w.a.data() + row, static_cast<std::size_t>(w.a.outerStride()));
      row += static_cast<long>(run.fit_end - run.fit_begin);
    }
    std::vector<double> raw_sum(w.p, 0.0);
    for (std::size_t r : w.fit_rows) {
      const double* v = w.tm.values.data() + r * w.p;
      for (std::size_t j = 0; j < w.p; ++j) raw_sum[j] += v[j] * v[j];
    }
    w.scale.resize(p);
    w.unexcited.assign(w.p, false);
    for (long j = 0; j < p; ++j) {
      const double band_rms = w.a.col(j).norm() / std::sqrt(static_cast<double>(n_fit));
      const double raw = std::sqrt(raw_sum[static_cast<std::size_t>(j)] /
                                   static_cast<double>(n_fit));
      if (!(band_rms > 1e-12 * std::max(1.0, raw)) || !std::isfinite(band_rms)) {
        w.unexcited[static_cast<std::size_t>(j)] = true;
        w.scale(j) = 1.0;
        w.a.col(j).setZero();
      } else {
        w.scale(j) = band_rms;
        w.a.col(j) /= band_rms;
      }
    }
  }
  // Gauge of the 18-term set: sum c_i^2 = 1 and sum c_i c'_i = 0 leave the
  // trace of the induced and eddy matrices undetermined (the first would
  // only rescale the total field itself), so it is fixed at zero, unless
  // the shape analysis already holds one of its terms (sum c_i^2 = 1 is
  // exact, so ind_zz is held and the induced part equals the default set).
  if (options.terms.full) {
    for (const char* group : {"ind_", "eddy_"}) {
      std::vector<double> g(w.p, 0.0);
      double norm = 0;
      for (std::size_t j = 0; j < w.p; ++j) {
        const std::string& name = result.term_names[j];
        if (name.rfind(group, 0) == 0 && name.size() == std::string(group).size() + 2 &&
            name[name.size() - 1] == name[name.size() - 2]) {
          g[j] = 1.0 / w.scale(static_cast<long>(j));
          norm += g[j] * g[j];
        }
      }
      if (norm > 0) {
        for (double& v : g) v /= std::sqrt(norm);
        w.constraints.push_back(g);
      }
    }
  }
  w.bound.resize(w.p);
  const std::size_t aux_first = w.p - 3 * options.terms.aux.size();
  for (std::size_t j = 0; j < w.p; ++j) {
    w.bound[j] = PlausibleBound(result.term_names[j], w, aux_rms, j, aux_first);
  }

  // Term shapes: columns without the Bt factor (induced c_i c_j, eddy
  // c_i c'_j; permanent and aux are their own shapes), de-meaned and scaled
  // to unit RMS over (at most 20,000 of) the fitted rows. A near-null
  // combination was not excited independently (e.g. level driving:
  // c_x^2 + c_y^2 = 1 - c_z^2 constant, c_z' = 0).
  Eigen::MatrixXd shapes;
  {
    const std::size_t stride = std::max<std::size_t>(1, (n_fit + 19999) / 20000);
    const long m = static_cast<long>((n_fit + stride - 1) / stride);
    shapes.resize(m, static_cast<long>(w.p));
    std::vector<char> scaled(w.p);
    for (std::size_t j = 0; j < w.p; ++j) {
      const std::string& name = result.term_names[j];
      scaled[j] = name.rfind("ind_", 0) == 0 || name.rfind("eddy_", 0) == 0;
    }
    for (long r = 0; r < m; ++r) {
      const std::size_t i = w.fit_rows[static_cast<std::size_t>(r) * stride];
      for (std::size_t j = 0; j < w.p; ++j) {
        double v = w.tm.values[i * w.p + j];
        if (scaled[j]) v /= w.tm.bt[i];
        shapes(r, static_cast<long>(j)) = v;
      }
    }
    for (long j = 0; j < shapes.cols(); ++j) {
      shapes.col(j).array() -= shapes.col(j).mean();
      const double rms = shapes.col(j).norm() / std::sqrt(static_cast<double>(m));
      if (rms > 0 && std::isfinite(rms)) {
        shapes.col(j) /= rms;
      } else {
        shapes.col(j).setZero();
      }
    }
  }
  const CompressedSystem shape_system =
      DesignCompressor(shapes).Compress(Eigen::VectorXd::Zero(shapes.rows()));
  clock.Mark("shapes");

  std::vector<bool> held;
  std::vector<std::string> notes(w.p);
  clock.Mark("design");
  const DesignCompressor design(w.a);
  const double fixed_lambda = options.ridge_auto ? -1.0 : options.ridge;
  result.ridge_method = options.ridge_auto ? "gcv" : "fixed";

  // Determination: hold null or unexcited directions, undetermined or
  // implausible terms one at a time (the worst first) until every free term
  // is determined; then solve.
  auto determine = [&](const CompressedSystem& base) {
    held = w.unexcited;
    for (std::size_t j = 0; j < w.p; ++j) {
      notes[j] = held[j] ? "no variation in the band (not excited)" : "";
    }
    for (std::size_t round = 0; round <= w.p; ++round) {
      if (FreeColumns(held).empty()) break;
      if (HoldNullDirection(shape_system, kShapeNullSingularValue,
                            "not excited independently of the other terms",
                            &held, &notes)) {
        continue;
      }
      const CompressedSystem augmented = Augment(base, w, held);
      if (HoldNullDirection(augmented, kNullSingularValue,
                            "no independent excitation", &held, &notes)) {
        continue;
      }
      Solution s = SolveWith(w, augmented, held, fixed_lambda, true);
      if (!s.ok) return s;
      const std::vector<int> free = FreeColumns(held);
      const CompressedSystem sub = SubSystem(augmented, free);
      const long q = sub.r.cols();
      // Standard errors from the data alone (no ridge), physical units.
      const double sigma2 = WhiteVariance(w, s);
      const double band_sigma =
          std::sqrt(s.rss / std::max(1.0, static_cast<double>(n_fit) - s.dof));
      Eigen::MatrixXd rinv = Eigen::MatrixXd::Identity(q, q);
      sub.r.triangularView<Eigen::Upper>().solveInPlace(rinv);
      double worst = 1.0;
      long worst_j = -1;
      std::string worst_note;
      for (long i = 0; i < q; ++i) {
        const std::size_t j = static_cast<std::size_t>(free[static_cast<std::size_t>(i)]);
        const double sc = w.scale(static_cast<long>(j));
        const double se = std::sqrt(sigma2 * rinv.row(i).squaredNorm()) / sc;
        const double value = s.x(static_cast<long>(j)) / sc;
        const double bound = w.bound[j];
        const std::string unit = TermUnit(result.term_names[j]);
        // Excitation: a coefficient at the plausible limit would change the
        // band-passed field by bound * sc (RMS); below the residual noise
        // the flight cannot see the term at all.
        const double r_excite = band_sigma / (bound * sc);
        const double r_value = std::fabs(value) / bound;
        const double r_se = se / (kUndeterminedFraction * bound);
        if (std::isfinite(r_excite) && r_excite > worst) {
          worst = r_excite;
          worst_j = static_cast<long>(j);
          worst_note = "not excited: even +-" + Sci(bound) + " " + unit +
                       " would change the band-passed field by only " +
                       Sci(bound * sc) + " nT RMS, below the residual " +
                       Sci(band_sigma) + " nT";
        }
        if (std::isfinite(r_value) && r_value > worst) {
          worst = r_value;
          worst_j = static_cast<long>(j);
          worst_note = "implausible value " + Sci(value) + " " + unit +
                       " (plausible within +-" + Sci(bound) + ")";
        }
        if (std::isfinite(r_se) && r_se > worst) {
          worst = r_se;
          worst_j = static_cast<long>(j);
          worst_note = "standard error " + Sci(se) + " " + unit + " exceeds " +
                       Sci(kUndeterminedFraction * bound);
        }
      }
      if (worst_j < 0) return s;
      held[static_cast<std::size_t>(worst_j)] = true;
      notes[static_cast<std::size_t>(worst_j)] = worst_note;
    }
    return SolveWith(w, Augment(base, w, held), held, fixed_lambda, true);
  };

  // ---- maneuvers (detected on a second thread meanwhile) -----------------
  std::vector<Maneuver> maneuvers;
  if (options.maneuvers_given) {
    maneuvers = options.maneuvers;
    result.maneuver_source =
        options.maneuver_source.empty() ? "given" : options.maneuver_source;
  } else {
    const ManeuverDetection detection = detection_job.get();
    maneuvers = detection.maneuvers;
    result.maneuver_source = detection.source;
  }
  if (maneuvers.empty()) {
    result.message =
        "no pitch, roll or yaw maneuvers found (maneuver source: " +
        result.maneuver_source +
        "): fly the compensation box (pitch, roll and yaw at four headings) "
        "or give the maneuver times with --segments FILE";
    return result;
  }
  if (maneuvers.size() < 12) {
    result.warnings.push_back("found " + std::to_string(maneuvers.size()) +
                              " of the 12 maneuvers of a full box "
                              "(pitch, roll, yaw at four headings)");
  }

  clock.Mark("maneuvers (wait)");
  // Condition number of the equilibrated matrix over its excited columns.
  std::vector<double> band_full = BandPassRuns(w, w.field);
  Eigen::VectorXd y = AtFitRows(w, band_full);
  const CompressedSystem first_system = design.Compress(y);
  {
    const CompressedSystem s = Augment(first_system, w, w.unexcited);
    const SvdAnalysis svd = AnalyseSystem(SubSystem(s, FreeColumns(w.unexcited)));
    result.condition_number = svd.condition_number;
  }

  auto physical = [&](const Eigen::VectorXd& x_e) {
    std::vector<double> v(w.p);
    for (std::size_t j = 0; j < w.p; ++j) {
      v[j] = x_e(static_cast<long>(j)) / w.scale(static_cast<long>(j));
    }
    return v;
  };

  // The measured field aligned by the current lag, and the same with the
  // outliers' excess removed (robust loss; otherwise identical).
  std::vector<double> aligned;
  aligned.reserve(w.n);
  AdviseHugePages(aligned.data(), w.n * sizeof(double));
  aligned = w.field;
  // (Only the robust loss cleans; without it `cleaned` stays empty and the
  // aligned field is used.)
  std::vector<double> cleaned;
  const bool robust = options.loss != RobustLoss::kNone;
  if (robust) cleaned = w.field;
  clock.Mark("qr+shape+cond");
  Solution solution = determine(first_system);
  if (!solution.ok) {
    result.message = "the least-squares solve failed: " + solution.message;
    return result;
  }

  clock.Mark("determine");
  // ---- robust loss (pseudo-observations, see fit.h step 7) -----------------
  std::size_t downweighted = 0;
  // High-frequency part of the raw residual: residual minus the median of
  // its neighbours within ~0.3 s, at least 3 on each side (keeps a spike,
  // even two in a window; drops geology, diurnal and the slow part of any
  // misfit).
  auto raw_residual_hp = [&](const std::vector<double>& field,
                             const std::vector<double>& v) {
    std::vector<double> r(w.n, 0.0);
    for (const Run& run : w.runs) {
      for (std::size_t i = run.begin; i < run.end; ++i) {
        double h = 0;
        for (std::size_t j = 0; j < w.p; ++j) h += w.tm.values[i * w.p + j] * v[j];
        r[i] = field[i] - h;
      }
    }
    const std::size_t half =
        std::max<std::size_t>(3, static_cast<std::size_t>(std::lround(0.3 * w.rate)));
    return NeighbourMedianResidual(w, r, half);
  };
  // Robust scale: 1.4826 x the median absolute deviation of the residuals
  // (re-estimated at every iteration from the current, un-weighted
  // residuals), times the loss's tuning constant.
  auto robust_scale = [&](const std::vector<double>& hp) {
    std::vector<double> in_runs;
    for (const Run& run : w.runs) {
      in_runs.insert(in_runs.end(), hp.begin() + static_cast<long>(run.begin),
                     hp.begin() + static_cast<long>(run.end));
    }
    const double med = Median(in_runs);
    for (double& v : in_runs) v = std::fabs(v - med);
    const double sigma = kMadToSigma * Median(in_runs);
    return (options.loss == RobustLoss::kHuber ? kHuberTuning : kCauchyTuning) *
           sigma;
  };
  // Pseudo-observations (Huber 1981, sec. 7.8): field* = field - (r - psi(r))
  // for the high-frequency residual r, iterated on field* so that a cluster
  // of spikes is taken apart over successive passes.
  auto robust_iterations = [&]() {
    if (options.loss == RobustLoss::kNone) return;
    cleaned = aligned;
    for (int iteration = 0; iteration < 30; ++iteration) {
      const std::vector<double> hp = raw_residual_hp(cleaned, physical(solution.x));
      const double c = robust_scale(hp);
      if (!(c > 0) || !std::isfinite(c)) {
        result.warnings.push_back(
            "the robust loss was not applied: the residuals' median absolute "
            "deviation is zero");
        return;
      }
      result.loss_scale_nT = c;
      std::unique_ptr<ceres::LossFunction> loss;
      if (options.loss == RobustLoss::kHuber) {
        loss = std::make_unique<ceres::HuberLoss>(c);
      } else {
        loss = std::make_unique<ceres::CauchyLoss>(c);
      }
      downweighted = 0;
      for (const Run& run : w.runs) {
        for (std::size_t i = run.begin; i < run.end; ++i) {
          // Weight rho'(r^2) of the Ceres loss; psi(r) = rho' r.
          double rho[3];
          loss->Evaluate(hp[i] * hp[i], rho);
          if (rho[1] < 0.5) ++downweighted;
          cleaned[i] -= (1.0 - rho[1]) * hp[i];
        }
      }
      band_full = BandPassRuns(w, cleaned);
      y = AtFitRows(w, band_full);
      Solution next = determine(design.Compress(y));
      if (!next.ok) break;
      const double change = (next.x - solution.x).cwiseAbs().maxCoeff();
      const double size = 1.0 + solution.x.cwiseAbs().maxCoeff();
      solution = next;
      if (change < 1e-7 * size) break;
    }
  };
  robust_iterations();

  clock.Mark("robust");
  // ---- lag -----------------------------------------------------------------
  if (w.scalar && options.estimate_lag && options.max_lag_s > 0) {
    // Searched on the band-passed cleaned field at lag 0; without the
    // robust loss that is band_full as it stands (the band-passed field).
    std::vector<double> band_cleaned;
    if (robust) band_cleaned = BandPassRuns(w, cleaned);
    const LagResult lag =
        EstimateLag(w, robust ? band_cleaned : band_full, held,
                    solution.lambda, options.max_lag_s * w.rate);
    if (lag.ok) {
      result.lag_estimated = true;
      result.lag_s = lag.lag_samples / w.rate;
      result.lag_std_error_s = lag.std_error_samples / w.rate;
      if (lag.at_limit) {
        result.warnings.push_back(
            "the lag estimate " + Fixed(result.lag_s, 3) +
            " s lies at the search limit: check the time stamps of the "
            "scalar sensor or raise --max-lag");
      }
      aligned = ShiftByLag(*w.time, w.field, result.lag_s, w.rate,
                           options.gap_factor);
      if (robust) cleaned = aligned;
      band_full = BandPassRuns(w, aligned);
      y = AtFitRows(w, band_full);
      solution = determine(design.Compress(y));
      if (!solution.ok) {
        result.message = "the least-squares solve failed: " + solution.message;
        return result;
      }
      robust_iterations();
    }
  }
  if (options.loss != RobustLoss::kNone) {
    // Samples whose reading the loss moved by more than its scale.
    downweighted = 0;
    for (const Run& run : w.runs) {
      for (std::size_t i = run.begin; i < run.end; ++i) {
        if (std::fabs(aligned[i] - cleaned[i]) > result.loss_scale_nT) ++downweighted;
      }
    }
    result.warnings.push_back(
        std::to_string(downweighted) + " sample(s) (" +
        Fixed(100.0 * static_cast<double>(downweighted) /
                  static_cast<double>(std::max<std::size_t>(1, n_fit)), 2) +
        "%) treated as outliers by the " + result.loss +
        " loss (reading moved by more than " + Sci(result.loss_scale_nT) + " nT)");
  }
  // Metrics below use the measured (aligned, not cleaned) field; without
  // the robust loss band_full is already that.
  if (robust) {
    band_full = BandPassRuns(w, aligned);
    y = AtFitRows(w, band_full);
  }

  clock.Mark("lag");
  // ---- coefficients --------------------------------------------------------
  result.ridge_lambda = solution.lambda;
  const double sigma2 = WhiteVariance(w, solution);
  result.residual_sigma_nT =
      std::sqrt(solution.rss / std::max(1.0, static_cast<double>(n_fit) - solution.dof));
  result.values = physical(solution.x);
  for (std::size_t j = 0; j < w.p; ++j) {
    FitCoefficient c;
    c.name = result.term_names[j];
    c.unit = TermUnit(c.name);
    c.value = result.values[j];
    const double var =
        solution.covariance_ok
            ? solution.covariance(static_cast<long>(j), static_cast<long>(j)) * sigma2
            : kNaN;
    // NaN stays NaN (reported with a warning below); a held term is fixed,
    // so its covariance entry is exactly 0.
    c.std_error = std::isnan(var) ? kNaN
                                  : std::sqrt(std::max(0.0, var)) /
                                        w.scale(static_cast<long>(j));
    c.held = held[j];
    c.note = notes[j];
    result.coefficients.push_back(c);
    if (c.held) {
      result.warnings.push_back(
          "term " + c.name + " is not determined by this flight (" + c.note +
          "): held at 0; " + HoldHint(c.name));
    }
  }
  if (!solution.covariance_ok) {
    result.warnings.push_back(
        "standard errors could not be computed (singular covariance)");
  }
  std::size_t free_count = 0;
  for (bool h : held) free_count += h ? 0 : 1;
  if (free_count < 3) {
    result.message =
        "the flight determines only " + std::to_string(free_count) + " of " +
        std::to_string(w.p) +
        " terms: fly pitch, roll and yaw maneuvers at four headings";
    return result;
  }

  // ---- series and metrics --------------------------------------------------
  HugeAssign(&result.interference, w.n, kNaN);
  double h_sum = 0;
  std::size_t h_count = 0;
  for (std::size_t i = 0; i < w.n; ++i) {
    if (w.tm.flags[i] & models::kFlagBadSample) continue;
    double h = 0;
    bool finite = true;
    for (std::size_t j = 0; j < w.p; ++j) {
      const double v = w.tm.values[i * w.p + j];
      finite = finite && std::isfinite(v);
      h += v * result.values[j];
    }
    if (!finite) continue;
    result.interference[i] = h;
    if (good[i]) {
      h_sum += h;
      ++h_count;
    }
  }
  result.interference_mean_nT = h_count ? h_sum / static_cast<double>(h_count) : 0.0;

  HugeAssign(&result.band_before, w.n, kNaN);
  HugeAssign(&result.band_after, w.n, kNaN);
  {
    // A x in chunks of rows (no full-length temporary).
    constexpr long kChunk = 4096;
    Eigen::VectorXd fitted(kChunk);
    for (long r0 = 0; r0 < static_cast<long>(n_fit); r0 += kChunk) {
      const long len = std::min(kChunk, static_cast<long>(n_fit) - r0);
      fitted.head(len).noalias() = w.a.middleRows(r0, len) * solution.x;
      for (long r = r0; r < r0 + len; ++r) {
        const std::size_t i = w.fit_rows[static_cast<std::size_t>(r)];
        result.band_before[i] = y(r);
        result.band_after[i] = y(r) - fitted(r - r0);
      }
    }
  }
  result.maneuvers = ManeuverPeakToPeak(result.time, result.band_before,
                                        result.band_after, maneuvers);
  result.fom_before_nT = Fom(result.maneuvers, false);
  result.fom_after_nT = Fom(result.maneuvers, true);
  result.improvement_ratio =
      ImprovementRatio(result.band_before, result.band_after);
  result.band_rms_before_nT = Rms(result.band_before);
  result.band_rms_after_nT = Rms(result.band_after);

  clock.Mark("metrics");
  // ---- leave-one-heading-out cross-validation ------------------------------
  // Each fitted row belongs to the window of one heading (its maneuvers,
  // padded by the edge trim) or to none. Every block is QR-compressed once;
  // a fold stacks the p x p blocks of the other headings and the rest, so
  // the n rows are visited once for all folds.
  if (options.cross_validate) {
    const std::vector<HeadingGroup> groups = GroupByHeading(maneuvers);
    const std::size_t g_count = groups.size();
    if (g_count >= 2) {
      std::vector<std::pair<double, double>> windows;
      std::vector<std::vector<Maneuver>> held_out(g_count);
      for (std::size_t g = 0; g < g_count; ++g) {
        double t0 = INFINITY, t1 = -INFINITY;
        for (std::size_t m : groups[g].maneuvers) {
          t0 = std::min(t0, maneuvers[m].start_s);
          t1 = std::max(t1, maneuvers[m].end_s);
          held_out[g].push_back(maneuvers[m]);
        }
        windows.emplace_back(t0 - trim_s, t1 + trim_s);
      }
      // Block of each fitted row (g_count: none), and each block as its
      // contiguous stretches [begin, end) of rows (blocks are time windows).
      std::vector<std::uint32_t> owner(n_fit);
      for (std::size_t r = 0; r < n_fit; ++r) {
        const double t = (*w.time)[w.fit_rows[r]];
        std::size_t b = g_count;
        for (std::size_t g = 0; g < g_count && b == g_count; ++g) {
          if (t >= windows[g].first && t <= windows[g].second) b = g;
        }
        owner[r] = static_cast<std::uint32_t>(b);
      }
      std::vector<std::vector<std::pair<long, long>>> stretches(g_count + 1);
      for (std::size_t r0 = 0; r0 < n_fit;) {
        std::size_t r1 = r0 + 1;
        while (r1 < n_fit && owner[r1] == owner[r0]) ++r1;
        stretches[owner[r0]].emplace_back(static_cast<long>(r0), static_cast<long>(r1));
        r0 = r1;
      }
      auto block_of = [&](std::size_t b) {
        std::vector<long> rows;
        for (const auto& [r0, r1] : stretches[b]) {
          for (long r = r0; r < r1; ++r) rows.push_back(r);
        }
        return rows;
      };
      // Gram matrix, A^T y and ||y||^2 of each block, summed over its
      // contiguous stretches of rows (blocks are time windows).
      const long p = static_cast<long>(w.p);
      std::vector<Eigen::MatrixXd> gram(g_count + 1, Eigen::MatrixXd::Zero(p, p));
      std::vector<Eigen::VectorXd> aty(g_count + 1, Eigen::VectorXd::Zero(p));
      std::vector<double> yy(g_count + 1, 0.0);
      std::vector<long> block_rows(g_count + 1, 0);
      {
        for (std::size_t b = 0; b <= g_count; ++b) {
          for (const auto& [r0, r1] : stretches[b]) {
            const long at = r0, len = r1 - r0;
            gram[b].selfadjointView<Eigen::Lower>().rankUpdate(
                w.a.middleRows(at, len).transpose());
            aty[b].noalias() += w.a.middleRows(at, len).transpose() * y.segment(at, len);
            yy[b] += y.segment(at, len).squaredNorm();
            block_rows[b] += len;
          }
        }
        for (Eigen::MatrixXd& g : gram) {
          g.triangularView<Eigen::StrictlyUpper>() = g.transpose();
        }
      }
      // Fallback for a fold too ill-conditioned for the Gram route: the
      // Householder QR of each block's rows, stacked (as CompressedDesign).
      std::vector<CompressedSystem> compressed;
      auto householder_blocks = [&]() {
        if (!compressed.empty()) return;
        compressed.resize(g_count + 1);
        for (std::size_t b = 0; b <= g_count; ++b) {
          const std::vector<long> block = block_of(b);
          const long m = static_cast<long>(block.size());
          Eigen::MatrixXd ab(m, p);
          Eigen::VectorXd yb(m);
          for (long r = 0; r < m; ++r) {
            ab.row(r) = w.a.row(block[static_cast<std::size_t>(r)]);
            yb(r) = y(block[static_cast<std::size_t>(r)]);
          }
          if (m >= p) {
            compressed[b] = Compress(ab, yb);
          } else {  // fewer rows than terms: keep them as they are
            compressed[b].r = ab;
            compressed[b].z = yb;
            compressed[b].rows = m;
            compressed[b].y_sum_squares = yb.squaredNorm();
          }
        }
      };
      std::vector<double> after = HugeVector(w.n, kNaN);  // held-out residual, one fold at a time
      for (std::size_t g = 0; g < g_count; ++g) {
        CrossValidationFold fold;
        fold.heading_deg = groups[g].heading_deg;
        fold.maneuvers = groups[g].maneuvers.size();
        const std::vector<ManeuverMetric> full = ManeuverPeakToPeak(
            result.time, result.band_before, result.band_after, held_out[g]);
        fold.fom_before_nT = Fom(full, false);
        fold.fom_full_fit_nT = Fom(full, true);
        long train_rows = 0;
        double y2 = 0;
        Eigen::MatrixXd gram_train = Eigen::MatrixXd::Zero(p, p);
        Eigen::VectorXd aty_train = Eigen::VectorXd::Zero(p);
        for (std::size_t b = 0; b <= g_count; ++b) {
          if (b == g) continue;
          train_rows += block_rows[b];
          y2 += yy[b];
          gram_train += gram[b];
          aty_train += aty[b];
        }
        if (train_rows >= static_cast<long>(min_rows) && train_rows >= p) {
          CompressedSystem train;
          if (!CompressGram(gram_train, aty_train, y2, train_rows,
                            DesignCompressor::kMaxNormalCondition, &train)) {
            householder_blocks();
            long stacked = 0;
            double outside = 0;
            for (std::size_t b = 0; b <= g_count; ++b) {
              if (b == g) continue;
              stacked += compressed[b].r.rows();
              outside += compressed[b].outside_sum_squares;
            }
            Eigen::MatrixXd as(stacked, p);
            Eigen::VectorXd zs(stacked);
            long at = 0;
            for (std::size_t b = 0; b <= g_count; ++b) {
              if (b == g || compressed[b].r.rows() == 0) continue;
              as.middleRows(at, compressed[b].r.rows()) = compressed[b].r;
              zs.segment(at, compressed[b].r.rows()) = compressed[b].z;
              at += compressed[b].r.rows();
            }
            train = Compress(as, zs);
            train.outside_sum_squares += outside;
            train.y_sum_squares = y2;
            train.rows = train_rows;
          }
          const Solution s = SolveWith(w, Augment(train, w, held), held,
                                       solution.lambda, false);
          if (s.ok) {
            for (const auto& [r0, r1] : stretches[g]) {
              for (long r = r0; r < r1; ++r) {
                after[w.fit_rows[static_cast<std::size_t>(r)]] =
                    y(r) - w.a.row(r).dot(s.x);
              }
            }
            fold.fom_nT = Fom(ManeuverPeakToPeak(result.time, result.band_before,
                                                 after, held_out[g]),
                              true);
            for (const auto& [r0, r1] : stretches[g]) {  // back to all NaN
              for (long r = r0; r < r1; ++r) {
                after[w.fit_rows[static_cast<std::size_t>(r)]] = kNaN;
              }
            }
          }
        }
        result.cross_validation.push_back(fold);
        if (std::isfinite(fold.fom_nT) && std::isfinite(fold.fom_full_fit_nT) &&
            fold.fom_nT > 2.0 * fold.fom_full_fit_nT &&
            fold.fom_nT > 0.05 * fold.fom_before_nT) {
          result.warnings.push_back(
              "heading " + Fixed(groups[g].heading_deg, 0) +
              " deg: the coefficients fitted without it leave " +
              Fixed(fold.fom_nT, 3) + " nT FOM there (full fit " +
              Fixed(fold.fom_full_fit_nT, 3) +
              " nT): the model does not generalise well across headings");
        }
      }
    }
  }

  clock.Mark("cv");
  result.usable = true;
  result.message = "ok";
  return result;
}

}  // namespace fluxtrim::core
