#pragma once
// Ridge parameter by generalised cross-validation, and the singular-value
// analysis of a design matrix, both from its QR-compressed form.
//
// Convention: the ridge problem is
//   minimise ||A x - y||^2 + n lambda ||x||^2        (n = rows of A),
// i.e. lambda is a weight per sample. With columns scaled to unit RMS (the
// equilibration of fit.h), A/sqrt(n) has unit-norm columns and singular
// values s_i in [0, sqrt(p)]; the ridge filter factor of direction i is
// s_i^2 / (s_i^2 + lambda), so lambda = 1e-8 damps directions whose
// singular value is below about 1e-4.

#include <string>
#include <vector>

#include <Eigen/Core>

#include "src/core/least_squares.h"

namespace fluxtrim::core {

// Singular values (descending) and right singular vectors of A/sqrt(n),
// computed from R (A = Q R): the singular values of R/sqrt(n) are those of
// A/sqrt(n).
struct SvdAnalysis {
  Eigen::VectorXd singular_values;  // descending
  Eigen::MatrixXd v;                // p x p, column i belongs to value i
  Eigen::VectorXd beta;             // U^T z / sqrt(n): data along each direction
  double condition_number = 0;      // s_max / s_min (inf when s_min = 0)
};
SvdAnalysis AnalyseSystem(const CompressedSystem& system);

// The compressed system of a subset of A's columns (indices into 0..p-1),
// derived from the full one without revisiting the n rows: A[:, S] =
// Q R[:, S], so a QR of the p x q matrix R[:, S] gives the subset's R and
// Q^T y.
CompressedSystem SubSystem(const CompressedSystem& system,
                           const std::vector<int>& columns);

// The weakest direction of the subsystem of `columns`: when its singular
// value is at most `threshold` times the largest, the column loading most
// on it (ties within a factor 2: the later column, so that the 18-term set
// gives up ind_zz / eddy_zz first) and that relative singular value;
// column -1 otherwise. Used to hold terms the data cannot separate.
struct NullDirection {
  int column = -1;                      // index into system's columns
  double relative_singular_value = 0;   // s_min / s_max
};
NullDirection FindNullDirection(const CompressedSystem& system,
                                const std::vector<int>& columns,
                                double threshold);

// Indices j with held[j] false.
std::vector<int> FreeColumns(const std::vector<bool>& held);

// FindNullDirection over the free columns; when one is found, holds it
// (held[j] = true), sets notes[j] to "<what> (relative singular value
// <s>)" and returns true. The fit and inspect's excitation check hold terms
// with it, so they agree.
bool HoldNullDirection(const CompressedSystem& system, double threshold,
                       const char* what, std::vector<bool>* held,
                       std::vector<std::string>* notes);

struct GcvOptions {
  double min_lambda = 1e-16;   // search range of lambda (per sample)
  double max_lambda = 1.0;
  int points_per_decade = 10;  // grid before the golden-section refinement
  // Effective number of independent rows n_eff <= n. Band-passed residuals
  // are correlated; GCV's trace term uses n_eff (here n * sum g_k^2, the
  // noise gain of the filter) instead of n, since GCV assumes independent
  // errors and otherwise under-smooths (Opsomer, Wang & Yang 2001,
  // Statistical Science 16:134, discuss GCV under correlated errors).
  // 0 means n.
  double effective_rows = 0;
};

struct GcvResult {
  double lambda = 0;
  double score = 0;             // GCV function at lambda
  double degrees_of_freedom = 0;  // sum of filter factors
  bool at_lower_limit = false;
  bool at_upper_limit = false;
};

// Generalised cross-validation (Golub, Heath & Wahba 1979, Technometrics
// 21:215, eq. 1.4 with the SVD form of section 3):
//   G(lambda) = (1/n) ||(I - H) y||^2 / (1 - trace H / n_eff)^2,
//   H = A (A^T A + n lambda I)^{-1} A^T,
// where ||(I - H) y||^2 = outside + sum_i (lambda/(s_i^2+lambda))^2 beta_i^2
// and trace H = sum_i s_i^2/(s_i^2+lambda). Minimised over log10(lambda) on
// a grid, then refined by golden-section search.
GcvResult ChooseRidgeByGcv(const CompressedSystem& system,
                           const GcvOptions& options = {});
double GcvScore(const SvdAnalysis& svd, const CompressedSystem& system,
                double lambda, double effective_rows);

}  // namespace fluxtrim::core
