#pragma once
// In-flight adaptation of the compensation coefficients (`stream --adapt`):
// exponentially weighted (recursive) least squares on band-passed quantities,
// bounded by the fit's standard errors.
//
// For every compensated sample s the observer forms, in real time,
//   g(t)  = f(t + lag) - row(t) . theta_fit             (nT)
//   y(t)  = BP[g](t),  u_j(t) = BP[row_j](t) * sigma_j  (nT)
// with BP the causal Butterworth band-pass of the model's filter settings
// (CausalBandPass, same sections as the fit's zero-phase filter), row the
// Tolles-Lawson term row (models/tolles_lawson.h), theta_fit the fitted
// coefficients and sigma_j their standard errors. The unknown is
// z = (theta - theta_fit) / sigma, the change of each coefficient in units
// of its standard error: this equilibrates the columns (each u_j is the
// field of a one-sigma change) and makes the bound a box.
//
// Estimator: exponentially weighted least squares with forgetting factor
// lambda, the cost that RLS minimises (Haykin, Adaptive Filter Theory,
// 4th ed., ch. 9), with the fit as a prior of constant weight:
//   min_z  sum_i lambda^(n-i) (y_i - u_i' z)^2 + residual_sigma^2 |z|^2,
// the prior being z ~ N(0, I) (the fit's standard errors) against the fit's
// band-passed residual sigma. It is accumulated in information form,
//   R = lambda R + u u' + (1 - lambda) residual_sigma^2 I,  r = lambda r + u y
// (O(m^2) a sample), and solved z = R^-1 r by Cholesky at each update. The
// standard RLS recursion lets the prior decay as lambda^n, and its
// covariance then winds up in poorly excited directions: on a simulated
// 600 s flight without drift it moved perm_z, ind_xx and ind_yy to the 3
// sigma bound and tripled the band-passed residual (tests/core/
// adaptive_test.cc); keeping the prior (regularised RLS) avoids that. The
// solution is clipped to |z_j| <= bound_sigma, so each coefficient's total
// change from the fitted value never exceeds bound_sigma x its std_error.
//
// Every update_interval_s the compensator receives theta_fit + sigma * z.
// Held coefficients (not determined by the fit) and coefficients without a
// positive standard error are never changed. Samples that are flagged (gap
// edge, derivative not valid, attitude outside the fit's range, lag edge,
// bad) do not enter the RLS; a gap or a bad sample restarts the band-pass,
// and the first warmup_s after a (re)start only settle the filter.
//
// Adapted coefficients are not validated by a figure of merit, and `apply`
// after the flight does not reproduce an adapted stream.

#include <cstddef>
#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include <Eigen/Dense>

#include "models/compensator.h"
#include "proto/model.pb.h"
#include "src/core/butterworth.h"

namespace fluxtrim::core {

struct AdaptOptions {
  // RLS forgetting factor lambda, 0 < lambda <= 1. The memory is about
  // 1 / (1 - lambda) samples: 2000 samples (200 s at 10 Hz) by default.
  double forgetting = 0.9995;
  // Largest total change of a coefficient from its fitted value, in units
  // of its std_error from the model file.
  double bound_sigma = 3.0;
  // Coefficients handed to the compensator this often (s).
  double update_interval_s = 1.0;
  // Filter settling time after a start or gap (s); 0: 2 / low_hz of the
  // model's band (20 s for 0.1 Hz), a few time constants of the lowest
  // band edge (our choice).
  double warmup_s = 0.0;
  bool IsValid(std::string* error) const;
};

// One coefficient update, as logged.
struct AdaptUpdate {
  double time = 0.0;          // s, time of the last sample used
  int moved = 0;              // coefficients changed by more than
                              // kMovedSigma since the previous update
  double largest_sigma = 0.0; // largest |total change| / std_error
  std::string largest_name;   // the term with that change ("" when none)
  int clipped = 0;            // coefficients at +-bound_sigma
  std::size_t samples_used = 0;  // samples that entered the RLS so far
};

struct AdaptSummary {
  std::size_t samples_seen = 0;
  std::size_t samples_used = 0;  // entered the RLS
  std::size_t updates = 0;
  std::size_t adapted_terms = 0;  // coefficients allowed to move
  double largest_sigma = 0.0;     // largest |change| / std_error ever applied
  // Final change of each coefficient in std errors (0 for fixed ones), and
  // the final coefficients (physical units), in the model's term order.
  std::vector<double> change_sigma;
  std::vector<double> coefficients;
};

class Adapter {
 public:
  // A coefficient whose applied value moves by more than this (in std
  // errors) since the previous update counts as moved.
  static constexpr double kMovedSigma = 0.01;

  // Throws std::invalid_argument for invalid options and io::InputError
  // naming `source` when the model lacks what adaptation needs: a positive
  // quality.residual_sigma_nT, a valid band-pass (filter), at least one
  // coefficient with a positive std_error. on_update (may be empty) gets
  // every update.
  Adapter(const proto::CompensationModel& model, const AdaptOptions& options,
          const std::string& source,
          std::function<void(const AdaptUpdate&)> on_update);

  // Observes the samples the compensator just returned (it must keep term
  // rows: Compensator::KeepTermRows) and, once per interval, hands it new
  // coefficients. No allocation per sample.
  void Observe(models::Compensator& compensator,
               const models::CompensatedSample* samples, int n);

  const AdaptSummary& summary() const { return summary_; }
  // The log line of an update, without newline, e.g.
  // "adapt t=1234.5 s: 3 moved, largest change 1.42 sigma (ind_xy), 0
  // clipped, 812 samples".
  static std::string FormatUpdate(const AdaptUpdate& update);

 private:
  void Step(const double* u, double y);
  void Update(models::Compensator& compensator, double time);

  AdaptOptions options_;
  std::function<void(const AdaptUpdate&)> on_update_;
  std::vector<std::string> names_;
  std::vector<double> theta_fit_;    // physical units, all terms
  std::vector<std::size_t> adapted_; // term indices allowed to move
  std::vector<double> sigma_;        // std_error of adapted terms
  double residual_sigma_ = 0.0;
  BandPass band_pass_;
  CausalBandPass filter_;            // channel 0: g, then adapted rows
  std::size_t interval_samples_ = 1;
  std::size_t warmup_samples_ = 0;
  // Least-squares state, m = adapted_.size().
  std::vector<double> z_;            // m, estimate at the last update
  std::vector<double> p_;            // R, m x m information matrix
  std::vector<double> pu_;           // r, m
  std::vector<double> applied_z_;    // m, at the last update
  Eigen::LLT<Eigen::MatrixXd> llt_;  // sized once
  // Scratch (no allocation per sample).
  std::vector<double> in_, out_, u_, theta_;
  std::size_t since_update_ = 0;     // samples used since the last update
  std::size_t seen_since_update_ = 0;
  std::uint64_t last_index_ = 0;
  bool any_seen_ = false;
  AdaptSummary summary_;
};

}  // namespace fluxtrim::core
