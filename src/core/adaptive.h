#pragma once
// In-flight adaptation of the compensation coefficients (`stream --adapt`):
// a Kalman filter tracks the change of the coefficients since the fit, on
// band-passed quantities, bounded by the fit's standard errors.
//
// For every compensated sample s the observer forms, in real time,
//   g(t)  = f(t + lag) - row(t) . theta_fit             (nT)
//   y(t)  = BP[g](t),  u_j(t) = BP[row_j](t) * sigma_j  (nT)
// with BP the causal Butterworth band-pass of the model's filter settings
// (CausalBandPass, same sections as the fit's zero-phase filter), row the
// Tolles-Lawson term row (models/tolles_lawson.h), theta_fit the fitted
// coefficients and sigma_j their standard errors. The state is
// z = (theta - theta_fit) / sigma, the change of each coefficient since the
// fit in units of its standard error, and y = u'z + v.
//
// Estimator: Kalman filter for a random walk (Haykin, Adaptive Filter
// Theory, 4th ed., ch. 10, from memory; Ljung & Gunnarsson, Automatica 26
// (1990) 7-21, the random-walk alternative to a forgetting factor):
//   z(n+1) = z(n) + w,  w ~ N(0, q I),  q = drift_sigma_per_min^2 / (60 rate)
//   v ~ N(0, r),  r = residual_sigma^2 * max(1, rate / (2 (high - low)))
// The factor in r counts one independent sample per 1/(2 bandwidth) s: the
// band-passed residual is coloured, and treating its samples as
// independent would make the filter fit noise (common practice). The state
// starts at z = 0 with P = 0: the fit is taken as exact at the start and
// only the change since then is estimated (the fit's own error is not what
// adaptation is for). After each step z is clipped to |z_j| <= bound_sigma,
// so no coefficient ever moves more than bound_sigma x its std_error from
// the fitted value. O(m^2) a sample, no allocation.
//
// Every update_interval_s the compensator receives theta_fit + sigma * z
// and a level: the interference it removes is kept continuous across the
// update (interference_mean_nT += row . (theta_new - theta_old) at the
// update's sample). Without that, every update is a step of
// row . delta_theta in f_comp, and row holds large constant parts (c_z near
// 1, Bt c_i c_j of tens of thousands of nT): changes of a few hundredths of
// a standard error of perm_z or ind_xx, harmless to the band-passed
// interference itself, stepped f_comp by several pT each second and
// multiplied the band-passed residual of the demo validation box by up to
// 6 (measured; tests/core/adaptive_test.cc). With the level carried over,
// adaptation changes how the interference varies with attitude, not the
// level at a steady attitude.
//
// Held coefficients (not determined by the fit) and coefficients without a
// positive standard error are never changed. Samples that are flagged (gap
// edge, derivative not valid, attitude outside the fit's range, lag edge,
// bad) do not enter the filter; a gap or a bad sample restarts the
// band-pass, and the first warmup_s after a (re)start only settle it.
//
// Adapted coefficients are not validated by a figure of merit, and `apply`
// after the flight does not reproduce an adapted stream.

#include <cstddef>
#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "models/compensator.h"
#include "proto/model.pb.h"
#include "src/core/butterworth.h"

namespace fluxtrim::core {

struct AdaptOptions {
  // Random walk of every coefficient (the Kalman filter's process noise):
  // the standard deviation of its change over one minute, in its standard
  // errors (over T minutes: drift_sigma_per_min * sqrt(T)). Larger follows
  // a change faster and fits more noise; 0 freezes the fitted model.
  double drift_sigma_per_min = 1.0;
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
  double time = 0.0;             // s, time of the last sample used
  int moved = 0;                 // coefficients changed by more than
                                 // kMovedSigma since the previous update
  double largest_sigma = 0.0;    // largest |total change| / std_error
  std::string largest_name;      // the term with that change ("" when none)
  int clipped = 0;               // coefficients at +-bound_sigma
  std::size_t samples_used = 0;  // samples that entered the filter so far
  double level_nT = 0.0;         // level carried over so far (added to the
                                 // model's interference_mean_nT)
};

struct AdaptSummary {
  std::size_t samples_seen = 0;
  std::size_t samples_used = 0;  // entered the filter
  std::size_t updates = 0;
  std::size_t adapted_terms = 0;  // coefficients allowed to move
  double largest_sigma = 0.0;     // largest |change| / std_error ever applied
  double level_nT = 0.0;          // level carried over (AdaptUpdate)
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
  // "adapt t=1234.500 s: 3 moved, largest change 1.42 sigma (ind_xy), 0
  // clipped, 812 samples used, level -0.0031 nT".
  static std::string FormatUpdate(const AdaptUpdate& update);

 private:
  void Step(const double* u, double y);
  // row: the term row of the last observed sample (level continuity).
  void Update(models::Compensator& compensator, double time, const double* row);

  AdaptOptions options_;
  std::function<void(const AdaptUpdate&)> on_update_;
  std::vector<std::string> names_;
  std::vector<double> theta_fit_;     // physical units, all terms
  std::vector<std::size_t> adapted_;  // term indices allowed to move
  std::vector<double> sigma_;         // std_error of adapted terms
  double residual_sigma_ = 0.0;
  BandPass band_pass_;
  CausalBandPass filter_;  // channel 0: g, then adapted rows
  std::size_t interval_samples_ = 1;
  std::size_t warmup_samples_ = 0;
  // Kalman state, m = adapted_.size().
  std::vector<double> z_;              // m, change since the fit (std errors)
  std::vector<double> p_;              // m x m covariance of z, row-major
  std::vector<double> pu_;             // m, P u (scratch)
  std::vector<double> applied_z_;      // m, at the last update
  double q_ = 0.0;                     // process noise a sample (std errors^2)
  double r_ = 0.0;                     // measurement noise (nT^2)
  double mean_ = 0.0;                  // model's interference_mean_nT
  std::vector<double> applied_theta_;  // coefficients in the compensator
  // Scratch (no allocation per sample).
  std::vector<double> in_, out_, u_, theta_;
  std::size_t since_update_ = 0;  // samples used since the last update
  std::size_t seen_since_update_ = 0;
  std::uint64_t last_index_ = 0;
  bool any_seen_ = false;
  AdaptSummary summary_;
};

}  // namespace fluxtrim::core
