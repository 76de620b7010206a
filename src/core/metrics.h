#pragma once
// Figures of merit of a compensation. All statistics skip NaN samples (a
// gap in a channel); with no finite sample they return NaN.

#include <cstddef>
#include <vector>

#include "src/core/maneuvers.h"

namespace fluxtrim::core {

// max - min of the finite samples (nT when x is in nT); NaN when none.
double PeakToPeak(const double* x, std::size_t n);
double PeakToPeak(const std::vector<double>& x);

// Root mean square of the samples that are not NaN (an infinity makes it
// infinite); NaN when none.
double Rms(const double* x, std::size_t n);
double Rms(const std::vector<double>& x);
// RMS over the finite values (NaN and infinities skipped); NaN when none.
double FiniteRms(const std::vector<double>& x);

// Population standard deviation (divides by N, numpy.std default) of the
// finite samples.
double StandardDeviation(const double* x, std::size_t n);
double StandardDeviation(const std::vector<double>& x);

struct ManeuverMetric {
  Maneuver maneuver;
  double pp_before_nT = 0;  // peak-to-peak of band-passed field, uncompensated
  double pp_after_nT = 0;   // the same after compensation
  std::size_t samples = 0;  // samples with time in [start_s, end_s]
};

// Per-maneuver peak-to-peak of the band-passed field before and after
// compensation over the samples with time in [start_s, end_s]. time, before
// and after have one entry per sample (throws std::invalid_argument
// otherwise). A maneuver with no sample in range gets NaN values.
std::vector<ManeuverMetric> ManeuverPeakToPeak(
    const std::vector<double>& time, const std::vector<double>& band_before,
    const std::vector<double>& band_after,
    const std::vector<Maneuver>& maneuvers);

// Figure of merit: the sum of the per-maneuver peak-to-peak values (nT),
// after (after=true) or before compensation (common practice, no single
// source). NaN entries are skipped; NaN when there is none.
double Fom(const std::vector<ManeuverMetric>& metrics, bool after);

// Improvement ratio: standard deviation of the band-passed field before /
// after compensation (over samples where both are finite). NaN when the
// after deviation is zero or there are no samples.
double ImprovementRatio(const std::vector<double>& band_before,
                        const std::vector<double>& band_after);

}  // namespace fluxtrim::core
