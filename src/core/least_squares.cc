#include "src/core/least_squares.h"

#include <algorithm>
#include <cmath>
#include <memory>
#include <utility>

#include <Eigen/Cholesky>
#include <Eigen/QR>
#include <Eigen/SVD>
#include <ceres/ceres.h>

namespace fluxtrim::core {
namespace {

// Residuals R x - z of the compressed data block; Jacobian R (row-major).
class CompressedDataCost : public ceres::CostFunction {
 public:
  CompressedDataCost(const Eigen::MatrixXd* r, const Eigen::VectorXd* z)
      : r_(r), z_(z) {
    set_num_residuals(static_cast<int>(r->rows()));
    mutable_parameter_block_sizes()->push_back(static_cast<int>(r->cols()));
  }
  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override {
    const long p = r_->cols();
    Eigen::Map<const Eigen::VectorXd> x(parameters[0], p);
    Eigen::Map<Eigen::VectorXd>(residuals, r_->rows()) = (*r_) * x - (*z_);
    if (jacobians && jacobians[0]) {
      Eigen::Map<Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic,
                               Eigen::RowMajor>>(jacobians[0], r_->rows(), p) =
          *r_;
    }
    return true;
  }

 private:
  const Eigen::MatrixXd* r_;
  const Eigen::VectorXd* z_;
};

// Residuals G x for a stack of weighted rows G (prior and constraints).
class LinearPriorCost : public ceres::CostFunction {
 public:
  explicit LinearPriorCost(Eigen::MatrixXd g) : g_(std::move(g)) {
    set_num_residuals(static_cast<int>(g_.rows()));
    mutable_parameter_block_sizes()->push_back(static_cast<int>(g_.cols()));
  }
  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override {
    Eigen::Map<const Eigen::VectorXd> x(parameters[0], g_.cols());
    Eigen::Map<Eigen::VectorXd>(residuals, g_.rows()) = g_ * x;
    if (jacobians && jacobians[0]) {
      Eigen::Map<Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic,
                               Eigen::RowMajor>>(jacobians[0], g_.rows(),
                                                 g_.cols()) = g_;
    }
    return true;
  }

 private:
  Eigen::MatrixXd g_;
};

}  // namespace

ceres::CostFunction* NewLinearPriorCost(Eigen::MatrixXd g) {
  return new LinearPriorCost(std::move(g));
}

bool LeastSquaresOptions::IsValid(std::string* error) const {
  for (double w : prior_weights) {
    if (!(w >= 0) || !std::isfinite(w)) {
      if (error) *error = "prior weights must be finite and >= 0";
      return false;
    }
  }
  if (!(constraint_weight > 0) || !std::isfinite(constraint_weight)) {
    if (error) *error = "constraint weight must be finite and > 0";
    return false;
  }
  for (int j : fixed) {
    if (j < 0) {
      if (error) *error = "fixed term indices must be >= 0";
      return false;
    }
  }
  if (max_iterations < 1) {
    if (error) *error = "max_iterations must be >= 1";
    return false;
  }
  return true;
}

CompressedSystem Compress(const Eigen::Ref<const Eigen::MatrixXd>& a,
                          const Eigen::Ref<const Eigen::VectorXd>& y) {
  return CompressedDesign(a).Compress(y);
}

namespace {

// Applies Q^T of a Householder QR (vectors below the diagonal of qr) to v
// in place.
void ApplyQTranspose(const Eigen::MatrixXd& qr, const Eigen::VectorXd& h,
                     Eigen::VectorXd* v) {
  const auto householder =
      Eigen::HouseholderSequence<Eigen::MatrixXd, Eigen::VectorXd>(qr, h)
          .setLength(std::min(qr.rows(), qr.cols()));
  v->applyOnTheLeft(householder.transpose());
}

}  // namespace

CompressedDesign::CompressedDesign(const Eigen::Ref<const Eigen::MatrixXd>& a)
    : rows_(a.rows()), cols_(a.cols()) {
  const long p = cols_;
  // Blocks of kBlockRows rows; the last one takes the remainder when less
  // than p rows would be left.
  long begin = 0;
  while (begin < rows_) {
    long len = std::min(kBlockRows, rows_ - begin);
    if (rows_ - (begin + len) < std::max<long>(p, 1)) len = rows_ - begin;
    Block block;
    block.begin = begin;
    block.rows = len;
    Eigen::HouseholderQR<Eigen::MatrixXd> qr(a.middleRows(begin, len));
    block.qr = qr.matrixQR();
    block.coefficients = qr.hCoeffs();
    blocks_.push_back(std::move(block));
    begin += len;
  }
  if (blocks_.size() > 1) {
    Eigen::MatrixXd stack =
        Eigen::MatrixXd::Zero(static_cast<long>(blocks_.size()) * p, p);
    for (std::size_t b = 0; b < blocks_.size(); ++b) {
      stack.middleRows(static_cast<long>(b) * p, p) =
          blocks_[b].qr.topRows(p).triangularView<Eigen::Upper>();
    }
    Eigen::HouseholderQR<Eigen::MatrixXd> qr(stack);
    top_.rows = stack.rows();
    top_.qr = qr.matrixQR();
    top_.coefficients = qr.hCoeffs();
  }
}

CompressedSystem CompressedDesign::Compress(
    const Eigen::Ref<const Eigen::VectorXd>& y) const {
  CompressedSystem s;
  const long p = cols_;
  s.rows = rows_;
  s.y_sum_squares = y.squaredNorm();
  if (blocks_.size() == 1) {
    const Block& b = blocks_[0];
    s.r = b.qr.topRows(p).triangularView<Eigen::Upper>();
    Eigen::VectorXd qty = y;
    ApplyQTranspose(b.qr, b.coefficients, &qty);
    s.z = qty.head(p);
    s.outside_sum_squares = qty.tail(rows_ - p).squaredNorm();
    return s;
  }
  Eigen::VectorXd stacked(static_cast<long>(blocks_.size()) * p);
  double outside = 0;
  Eigen::VectorXd part;
  for (std::size_t i = 0; i < blocks_.size(); ++i) {
    const Block& b = blocks_[i];
    part = y.segment(b.begin, b.rows);
    ApplyQTranspose(b.qr, b.coefficients, &part);
    stacked.segment(static_cast<long>(i) * p, p) = part.head(p);
    outside += part.tail(b.rows - p).squaredNorm();
  }
  ApplyQTranspose(top_.qr, top_.coefficients, &stacked);
  s.r = top_.qr.topRows(p).triangularView<Eigen::Upper>();
  s.z = stacked.head(p);
  s.outside_sum_squares =
      outside + stacked.tail(stacked.size() - p).squaredNorm();
  return s;
}

namespace {

// Cholesky factor R (upper, p x p) of a Gram matrix over its non-zero
// columns, with zero rows and columns elsewhere; false when not positive
// definite there or when cond(R) > max_condition.
bool GramFactor(const Eigen::MatrixXd& gram, double max_condition,
                Eigen::MatrixXd* r) {
  const long p = gram.cols();
  std::vector<long> keep;
  for (long j = 0; j < p; ++j) {
    if (gram(j, j) != 0.0) keep.push_back(j);
  }
  const long q = static_cast<long>(keep.size());
  r->setZero(p, p);
  if (q == 0) return true;
  Eigen::MatrixXd g(q, q);
  for (long a = 0; a < q; ++a) {
    for (long b = 0; b < q; ++b) g(a, b) = gram(keep[a], keep[b]);
  }
  if (!g.allFinite()) return false;
  Eigen::LLT<Eigen::MatrixXd> llt(g);
  if (llt.info() != Eigen::Success) return false;
  const Eigen::MatrixXd rq = llt.matrixU();
  if (!rq.allFinite()) return false;
  // cond(R) = cond(A) on the kept columns.
  const Eigen::VectorXd s = Eigen::JacobiSVD<Eigen::MatrixXd>(rq).singularValues();
  if (!(s(q - 1) > 0) || s(0) > max_condition * s(q - 1)) return false;
  for (long a = 0; a < q; ++a) {
    for (long b = a; b < q; ++b) (*r)(keep[a], keep[b]) = rq(a, b);
  }
  return true;
}

// Solves R^T z = h for R upper triangular with zero rows/columns where its
// diagonal is 0 (z is 0 there).
Eigen::VectorXd SolveRTranspose(const Eigen::MatrixXd& r,
                                const Eigen::VectorXd& h) {
  const long p = r.cols();
  Eigen::VectorXd z = Eigen::VectorXd::Zero(p);
  for (long j = 0; j < p; ++j) {
    if (r(j, j) == 0.0) continue;
    double v = h(j);
    for (long i = 0; i < j; ++i) v -= r(i, j) * z(i);
    z(j) = v / r(j, j);
  }
  return z;
}

// Solves R x = z likewise.
Eigen::VectorXd SolveR(const Eigen::MatrixXd& r, const Eigen::VectorXd& z) {
  const long p = r.cols();
  Eigen::VectorXd x = Eigen::VectorXd::Zero(p);
  for (long j = p - 1; j >= 0; --j) {
    if (r(j, j) == 0.0) continue;
    double v = z(j);
    for (long k = j + 1; k < p; ++k) v -= r(j, k) * x(k);
    x(j) = v / r(j, j);
  }
  return x;
}

}  // namespace

DesignCompressor::DesignCompressor(const Eigen::MatrixXd& a,
                                   double max_condition)
    : a_(&a) {
  const long p = a.cols();
  bool ok = a.rows() >= p && p >= 1;
  if (ok) {
    Eigen::MatrixXd gram = Eigen::MatrixXd::Zero(p, p);
    gram.selfadjointView<Eigen::Lower>().rankUpdate(a.transpose());
    gram.triangularView<Eigen::StrictlyUpper>() = gram.transpose();
    ok = GramFactor(gram, max_condition, &r_);
  }
  if (!ok) householder_ = std::make_unique<CompressedDesign>(a);
}

CompressedSystem DesignCompressor::Compress(
    const Eigen::Ref<const Eigen::VectorXd>& y) const {
  if (householder_) return householder_->Compress(y);
  CompressedSystem s;
  s.rows = a_->rows();
  s.y_sum_squares = y.squaredNorm();
  s.r = r_;
  const Eigen::VectorXd h = a_->transpose() * y;
  s.z = SolveRTranspose(r_, h);
  const Eigen::VectorXd x = SolveR(r_, s.z);
  s.outside_sum_squares = (y - (*a_) * x).squaredNorm();
  return s;
}

bool CompressGram(const Eigen::MatrixXd& gram, const Eigen::VectorXd& h,
                  double y_sum_squares, long rows, double max_condition,
                  CompressedSystem* out) {
  if (gram.rows() != gram.cols() || gram.cols() != h.size()) return false;
  if (!GramFactor(gram, max_condition, &out->r)) return false;
  out->z = SolveRTranspose(out->r, h);
  out->rows = rows;
  out->y_sum_squares = y_sum_squares;
  out->outside_sum_squares = std::max(0.0, y_sum_squares - out->z.squaredNorm());
  return true;
}

LeastSquaresSummary SolveLeastSquares(const CompressedSystem& system,
                                      const LeastSquaresOptions& options) {
  LeastSquaresSummary summary;
  const long p = system.r.cols();
  std::string error;
  if (!options.IsValid(&error)) {
    summary.message = error;
    return summary;
  }
  if (p < 1 || system.r.rows() != p || system.z.size() != p) {
    summary.message = "compressed system has inconsistent sizes";
    return summary;
  }
  if (!options.prior_weights.empty() &&
      static_cast<long>(options.prior_weights.size()) != p) {
    summary.message = "prior_weights must have one value per term";
    return summary;
  }
  summary.x = Eigen::VectorXd::Zero(p);

  ceres::Problem problem;
  problem.AddResidualBlock(new CompressedDataCost(&system.r, &system.z),
                           nullptr, summary.x.data());
  // Prior rows: diagonal weights, then the weighted constraint rows.
  long prior_rows = 0;
  for (double w : options.prior_weights) prior_rows += (w > 0) ? 1 : 0;
  prior_rows += static_cast<long>(options.constraints.size());
  if (prior_rows > 0) {
    Eigen::MatrixXd g = Eigen::MatrixXd::Zero(prior_rows, p);
    long row = 0;
    for (long j = 0; j < static_cast<long>(options.prior_weights.size()); ++j) {
      if (options.prior_weights[j] > 0) g(row++, j) = options.prior_weights[j];
    }
    for (const auto& c : options.constraints) {
      if (static_cast<long>(c.size()) != p) {
        summary.message = "constraint rows must have one value per term";
        return summary;
      }
      for (long j = 0; j < p; ++j) g(row, j) = options.constraint_weight * c[j];
      ++row;
    }
    problem.AddResidualBlock(new LinearPriorCost(std::move(g)), nullptr,
                             summary.x.data());
  }

  if (!options.fixed.empty()) {
    for (int j : options.fixed) {
      if (j >= p) {
        summary.message = "fixed term index out of range";
        return summary;
      }
    }
    if (static_cast<long>(options.fixed.size()) >= p) {
      summary.usable = true;  // every term held at 0
      summary.data_sum_squares = system.z.squaredNorm() + system.outside_sum_squares;
      if (options.compute_covariance) {
        summary.covariance = Eigen::MatrixXd::Zero(p, p);
        summary.covariance_ok = true;
      }
      summary.message = "every term held at 0";
      return summary;
    }
    problem.SetManifold(summary.x.data(),
                        new ceres::SubsetManifold(static_cast<int>(p), options.fixed));
  }
  ceres::Solver::Options solver_options;
  solver_options.linear_solver_type = ceres::DENSE_QR;
  solver_options.minimizer_type = ceres::TRUST_REGION;
  solver_options.trust_region_strategy_type = ceres::LEVENBERG_MARQUARDT;
  // The problem is linear: a huge initial trust region makes the first
  // Levenberg-Marquardt step the Gauss-Newton step (its damping D/radius is
  // ~1e-16 relative), and the second iteration confirms convergence.
  solver_options.initial_trust_region_radius = 1e16;
  solver_options.max_num_iterations = options.max_iterations;
  solver_options.function_tolerance = 1e-16;
  solver_options.gradient_tolerance = 1e-30;
  solver_options.parameter_tolerance = 1e-15;
  solver_options.logging_type = ceres::SILENT;
  solver_options.minimizer_progress_to_stdout = false;
  solver_options.num_threads = 1;
  ceres::Solver::Summary ceres_summary;
  ceres::Solve(solver_options, &problem, &ceres_summary);
  summary.iterations = static_cast<int>(ceres_summary.iterations.size());
  summary.message = ceres_summary.BriefReport();
  if (!ceres_summary.IsSolutionUsable() || !summary.x.allFinite()) {
    summary.message = "least-squares solve failed: " + summary.message;
    return summary;
  }
  // ||A x - y||^2 = ||R x - z||^2 + outside part.
  summary.data_sum_squares =
      (system.r * summary.x - system.z).squaredNorm() +
      system.outside_sum_squares;

  if (options.compute_covariance) {
    ceres::Covariance::Options cov_options;
    cov_options.algorithm_type = ceres::DENSE_SVD;
    cov_options.num_threads = 1;
    ceres::Covariance covariance(cov_options);
    std::vector<std::pair<const double*, const double*>> blocks = {
        {summary.x.data(), summary.x.data()}};
    if (covariance.Compute(blocks, &problem)) {
      Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>
          cov(p, p);
      if (covariance.GetCovarianceBlock(summary.x.data(), summary.x.data(),
                                        cov.data())) {
        summary.covariance = cov;
        summary.covariance_ok = summary.covariance.allFinite();
      }
    }
  }
  summary.usable = true;
  return summary;
}

LeastSquaresSummary SolveLeastSquares(
    const Eigen::Ref<const Eigen::MatrixXd>& a,
    const Eigen::Ref<const Eigen::VectorXd>& y,
    const LeastSquaresOptions& options) {
  if (a.rows() < a.cols() || a.rows() != y.size() || a.cols() < 1) {
    LeastSquaresSummary summary;
    summary.message = "least squares needs rows >= cols >= 1 and one y per row";
    return summary;
  }
  return SolveLeastSquares(Compress(a, y), options);
}

}  // namespace fluxtrim::core
