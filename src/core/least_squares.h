#pragma once
// Linear least squares with a ridge prior, solved with Ceres.
//
// Problem (all quantities in the caller's units; fit.cc passes equilibrated
// columns, see fit.h):
//
//   minimise  ||A x - y||^2 + sum_j w_j^2 x_j^2 + sum_c (g_c . x)^2
//   subject to x_j = 0 for the fixed terms
//
// where A is n x p (row-major or column-major Eigen matrix, n >= p), y has n
// values, w_j are per-term prior weights (the ridge sqrt(n lambda) for every
// term, larger for terms held at zero) and g_c are optional linear constraint
// rows enforced softly with a large weight (gauge fixing of the 18-term set).
//
// Speed: A is first compressed with a Householder QR in Eigen (A = Q R), and
// Ceres is given the p residuals R x - Q^T y plus the prior blocks. Because
// ||A x - y||^2 = ||R x - Q^T y||^2 + ||(I - Q Q^T) y||^2 and the last term
// does not depend on x, this is mathematically the same least-squares
// problem as the n-row one (Golub & Van Loan, Matrix Computations, 4th ed.,
// section 5.3.3), with the same minimiser and the same Gauss-Newton Hessian
// (J^T J = R^T R + priors), hence the same covariance.

#include <memory>
#include <string>
#include <vector>

#include <Eigen/Core>

namespace ceres {
class CostFunction;
}

namespace fluxtrim::core {

// Ceres cost of the residuals G x for a stack of weighted rows G (a ridge
// prior, soft linear constraints), one parameter block of G.cols() values.
// The caller (a ceres::Problem) takes ownership.
ceres::CostFunction* NewLinearPriorCost(Eigen::MatrixXd g);

// The QR-compressed form of (A, y): R upper-triangular p x p, z = Q^T y, and
// the part of ||y||^2 outside the range of A.
struct CompressedSystem {
  Eigen::MatrixXd r;              // p x p, upper triangular
  Eigen::VectorXd z;              // p
  double outside_sum_squares = 0; // ||y||^2 - ||z||^2, >= 0
  double y_sum_squares = 0;       // ||y||^2
  long rows = 0;                  // n
};

// Householder QR compression (Eigen::HouseholderQR). Requires rows >= cols.
CompressedSystem Compress(const Eigen::Ref<const Eigen::MatrixXd>& a,
                          const Eigen::Ref<const Eigen::VectorXd>& y);

// The QR factorisation of A kept for several right-hand sides (lag search,
// robust iterations): each Compress(y) costs O(n p) instead of O(n p^2).
// Tall-skinny QR (Demmel, Grigori, Hoemmen & Langou 2012, SIAM J. Sci.
// Comput. 34:A206): blocks of kBlockRows rows are factorised on their own
// (in cache), their p x p R factors stacked and factorised again. The
// result is the QR of A (R unique up to the signs of its rows), with the
// same backward stability as one Householder QR.
class CompressedDesign {
 public:
  static constexpr long kBlockRows = 4096;
  explicit CompressedDesign(const Eigen::Ref<const Eigen::MatrixXd>& a);
  CompressedSystem Compress(const Eigen::Ref<const Eigen::VectorXd>& y) const;
  long rows() const { return rows_; }
  long cols() const { return cols_; }

 private:
  struct Block {
    long begin = 0, rows = 0;
    Eigen::MatrixXd qr;             // Householder vectors below, R above
    Eigen::VectorXd coefficients;   // Householder coefficients
  };
  long rows_ = 0, cols_ = 0;
  std::vector<Block> blocks_;
  Block top_;  // QR of the stacked R factors (when there are several blocks)
};

// The same compressed system as CompressedDesign, by the cheaper route of
// the semi-normal equations when that is sound (Bjorck, Numerical Methods
// for Least Squares Problems, 1996, sec. 2.2.4 and 6.6.5): R is the
// Cholesky factor of the Gram matrix A^T A (one symmetric rank-n update,
// half the flops of Householder QR and all in cache-friendly matrix
// products), z = R^-T A^T y, and the part of ||y||^2 outside the range of A
// is the squared norm of the residual y - A R^-1 z computed directly (no
// cancellation). Forming A^T A squares the condition number: the relative
// error of the solution grows like kappa^2 eps instead of kappa eps, so
// the route is taken only when kappa(A) <= max_condition (default 1e3:
// errors below ~1e-10 relative, far under the statistical ones); otherwise
// Householder TSQR (CompressedDesign) is used. Columns that are exactly
// zero are kept out of the Cholesky factor (their rows and columns of R are
// 0, as R^T R = A^T A requires).
//
// `a` is referenced, not copied: it must outlive the compressor, unchanged.
class DesignCompressor {
 public:
  static constexpr double kMaxNormalCondition = 1e3;
  explicit DesignCompressor(const Eigen::MatrixXd& a,
                            double max_condition = kMaxNormalCondition);
  CompressedSystem Compress(const Eigen::Ref<const Eigen::VectorXd>& y) const;
  // True when the semi-normal route is used.
  bool semi_normal() const { return householder_ == nullptr; }
  long rows() const { return a_->rows(); }
  long cols() const { return a_->cols(); }

 private:
  const Eigen::MatrixXd* a_;
  Eigen::MatrixXd r_;  // p x p, upper triangular (semi-normal route)
  std::unique_ptr<CompressedDesign> householder_;
};

// Cholesky compression of a Gram matrix G = A^T A with h = A^T y (e.g.
// summed over blocks of rows): R with R^T R = G, z = R^-T h, outside =
// y_sum_squares - ||z||^2 (clamped at 0; it carries cancellation, use it
// only where the residual is not needed to full precision). Returns false
// (and leaves *out unspecified) when G is not numerically positive
// definite on its non-zero columns or its condition exceeds
// max_condition^2; callers then fall back to a QR.
bool CompressGram(const Eigen::MatrixXd& gram, const Eigen::VectorXd& h,
                  double y_sum_squares, long rows, double max_condition,
                  CompressedSystem* out);

struct LeastSquaresOptions {
  // Per-term prior weights w_j (residual w_j x_j); empty means no prior.
  std::vector<double> prior_weights;
  // Terms held constant at 0 (ceres::SubsetManifold): an infinitely strong
  // prior. Their rows and columns of the covariance are 0.
  std::vector<int> fixed;
  // Soft linear constraints g . x = 0, one row of p values each, applied
  // with weight constraint_weight.
  std::vector<std::vector<double>> constraints;
  double constraint_weight = 1e6;
  // Compute (J^T J)^{-1} with ceres::Covariance.
  bool compute_covariance = true;
  int max_iterations = 50;

  bool IsValid(std::string* error) const;
};

struct LeastSquaresSummary {
  bool usable = false;          // solution found and finite
  std::string message;          // Ceres' report or why it failed
  Eigen::VectorXd x;            // p
  // (J^T J)^{-1} of the problem solved (data + priors), unscaled: multiply
  // by the residual variance for the coefficient covariance. Empty when not
  // requested or when Ceres could not compute it (rank deficient).
  Eigen::MatrixXd covariance;
  bool covariance_ok = false;
  double data_sum_squares = 0;  // ||A x - y||^2 at the solution (no priors)
  int iterations = 0;
};

// Solves the compressed problem. system.r must be p x p with p >= 1.
LeastSquaresSummary SolveLeastSquares(const CompressedSystem& system,
                                      const LeastSquaresOptions& options = {});

// Convenience: Compress, then SolveLeastSquares.
LeastSquaresSummary SolveLeastSquares(const Eigen::Ref<const Eigen::MatrixXd>& a,
                                      const Eigen::Ref<const Eigen::VectorXd>& y,
                                      const LeastSquaresOptions& options = {});

}  // namespace fluxtrim::core
