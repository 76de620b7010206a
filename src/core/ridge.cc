#include "src/core/ridge.h"

#include <algorithm>
#include <cstdio>
#include <cmath>
#include <limits>

#include <Eigen/QR>
#include <Eigen/SVD>

namespace fluxtrim::core {

SvdAnalysis AnalyseSystem(const CompressedSystem& system) {
  SvdAnalysis out;
  const double n = static_cast<double>(std::max<long>(system.rows, 1));
  Eigen::JacobiSVD<Eigen::MatrixXd> svd(system.r / std::sqrt(n),
                                        Eigen::ComputeFullU | Eigen::ComputeFullV);
  out.singular_values = svd.singularValues();
  out.v = svd.matrixV();
  out.beta = svd.matrixU().transpose() * system.z / std::sqrt(n);
  const long p = out.singular_values.size();
  if (p == 0) return out;
  const double smin = out.singular_values(p - 1);
  out.condition_number = smin > 0 ? out.singular_values(0) / smin
                                  : std::numeric_limits<double>::infinity();
  return out;
}

CompressedSystem SubSystem(const CompressedSystem& system,
                           const std::vector<int>& columns) {
  const long p = system.r.cols();
  const long q = static_cast<long>(columns.size());
  Eigen::MatrixXd rs(p, q);
  for (long j = 0; j < q; ++j) rs.col(j) = system.r.col(columns[j]);
  CompressedSystem out;
  out.rows = system.rows;
  out.y_sum_squares = system.y_sum_squares;
  if (q == 0) {
    out.r.resize(0, 0);
    out.z.resize(0);
    out.outside_sum_squares = system.y_sum_squares;
    return out;
  }
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(rs);
  out.r = qr.matrixQR().topRows(q).triangularView<Eigen::Upper>();
  Eigen::VectorXd qz = system.z;
  qz.applyOnTheLeft(qr.householderQ().transpose());
  out.z = qz.head(q);
  out.outside_sum_squares =
      system.outside_sum_squares + qz.tail(p - q).squaredNorm();
  return out;
}

double GcvScore(const SvdAnalysis& svd, const CompressedSystem& system,
                double lambda, double effective_rows) {
  const double n = static_cast<double>(system.rows);
  double residual = system.outside_sum_squares / n;
  double dof = 0;
  for (long i = 0; i < svd.singular_values.size(); ++i) {
    const double s2 = svd.singular_values(i) * svd.singular_values(i);
    const double f = s2 / (s2 + lambda);
    const double r = (1.0 - f) * svd.beta(i);
    residual += r * r;
    dof += f;
  }
  const double denom = 1.0 - dof / effective_rows;
  return residual / (denom * denom);
}

GcvResult ChooseRidgeByGcv(const CompressedSystem& system,
                           const GcvOptions& options) {
  GcvResult best;
  if (system.r.cols() == 0) return best;
  const SvdAnalysis svd = AnalyseSystem(system);
  const double n_eff = options.effective_rows > 0
                           ? options.effective_rows
                           : static_cast<double>(system.rows);
  const double lo = std::log10(options.min_lambda);
  const double hi = std::log10(options.max_lambda);
  const int points =
      std::max(2, static_cast<int>(std::ceil((hi - lo) *
                                             options.points_per_decade)) + 1);
  auto score = [&](double log_lambda) {
    return GcvScore(svd, system, std::pow(10.0, log_lambda), n_eff);
  };
  int best_k = 0;
  double best_score = std::numeric_limits<double>::infinity();
  const double step = (hi - lo) / (points - 1);
  for (int k = 0; k < points; ++k) {
    const double s = score(lo + k * step);
    // Prefer the smaller lambda on ties (flat GCV curve).
    if (s < best_score * (1 - 1e-12)) {
      best_score = s;
      best_k = k;
    }
  }
  // Golden-section refinement within the neighbouring grid cells.
  double a = lo + std::max(0, best_k - 1) * step;
  double b = lo + std::min(points - 1, best_k + 1) * step;
  const double g = (std::sqrt(5.0) - 1) / 2;
  double c = b - g * (b - a), d = a + g * (b - a);
  double fc = score(c), fd = score(d);
  for (int it = 0; it < 60 && (b - a) > 1e-6; ++it) {
    if (fc < fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - g * (b - a);
      fc = score(c);
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + g * (b - a);
      fd = score(d);
    }
  }
  double log_best = (a + b) / 2;
  double s_best = score(log_best);
  if (best_score <= s_best) {
    log_best = lo + best_k * step;
    s_best = best_score;
  }
  best.lambda = std::pow(10.0, log_best);
  best.score = s_best;
  for (long i = 0; i < svd.singular_values.size(); ++i) {
    const double s2 = svd.singular_values(i) * svd.singular_values(i);
    best.degrees_of_freedom += s2 / (s2 + best.lambda);
  }
  best.at_lower_limit = best_k == 0;
  best.at_upper_limit = best_k == points - 1;
  return best;
}

NullDirection FindNullDirection(const CompressedSystem& system,
                                const std::vector<int>& columns,
                                double threshold) {
  NullDirection d;
  if (columns.empty()) return d;
  const SvdAnalysis svd = AnalyseSystem(SubSystem(system, columns));
  const long q = svd.singular_values.size();
  if (q == 0) return d;
  const double s0 = svd.singular_values(0);
  if (svd.singular_values(q - 1) > threshold * s0) return d;
  const Eigen::VectorXd v = svd.v.col(q - 1).cwiseAbs();
  const double vmax = v.maxCoeff();
  long pick = 0;
  for (long i = 0; i < q; ++i) {
    if (v(i) >= 0.5 * vmax) pick = i;
  }
  d.column = columns[static_cast<std::size_t>(pick)];
  d.relative_singular_value = svd.singular_values(q - 1) / s0;
  return d;
}

std::vector<int> FreeColumns(const std::vector<bool>& held) {
  std::vector<int> cols;
  for (std::size_t j = 0; j < held.size(); ++j) {
    if (!held[j]) cols.push_back(static_cast<int>(j));
  }
  return cols;
}

bool HoldNullDirection(const CompressedSystem& system, double threshold,
                       const char* what, std::vector<bool>* held,
                       std::vector<std::string>* notes) {
  const NullDirection d = FindNullDirection(system, FreeColumns(*held), threshold);
  if (d.column < 0) return false;
  const std::size_t j = static_cast<std::size_t>(d.column);
  (*held)[j] = true;
  char value[64];
  std::snprintf(value, sizeof value, "%.3g", d.relative_singular_value);
  (*notes)[j] = std::string(what) + " (relative singular value " + value + ")";
  return true;
}

}  // namespace fluxtrim::core
