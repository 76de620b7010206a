#pragma once
// Shared by the fit tests and the benchmark: scenario texts of simulated
// flights (src/core/scenario.h runs the platform physics of
// models/simulator.h: the interference is |B + h| - |B| of a permanent,
// induced and eddy field, not the Tolles-Lawson formula run backwards) and
// an independent evaluation of coefficients on a recording.

#include <cmath>
#include <string>
#include <vector>

#include "models/tolles_lawson.h"
#include "src/core/butterworth.h"
#include "src/core/lag.h"
#include "src/core/metrics.h"
#include "src/core/scenario.h"

namespace fluxtrim::core::testing {

struct BoxScenario {
  double rate_hz = 10.0;
  double scalar_noise_nT = 0.005;
  bool scalar = true;
  double lag_s = 0.0;
  double spike_fraction = 0.0;
  double spike_amplitude_nT = 50.0;
  int cycles = 3;
  double settle_s = 10.0;
  unsigned seed = 42;
  std::string extra;  // appended verbatim (e.g. faults { dropouts {...} })
};

// A fixed-wing survey aircraft at 2,800 m: permanent, induced and eddy
// fields of a few tens of nT at the sensor (uncompensated FOM of tens of nT,
// common practice for a tail stinger), fluxgate noise 0.05 nT, light
// turbulence, mild geology and diurnal variation.
inline std::string AircraftBoxText(const BoxScenario& s) {
  std::string text =
      "name: \"test box\"\n"
      "seed: " + std::to_string(s.seed) + "\n"
      "sample_rate_hz: " + std::to_string(s.rate_hz) + "\n"
      "date: \"2025-06-14\"\n"
      "start_time_s: 30600\n"
      "start_lat_deg: -31.95 start_lon_deg: 141.45 start_alt_m: 2800\n"
      "platform {\n"
      "  kind: AIRCRAFT\n"
      "  permanent_nT { x: 12 y: -8 z: 25 }\n"
      "  induced { xx: 2e-4 xy: 5e-5 xz: -1e-4 yx: 3e-5 yy: -1.5e-4 yz: 6e-5\n"
      "            zx: -8e-5 zy: 4e-5 zz: 3e-4 }\n"
      "  eddy_s { xx: 3e-4 xy: -1e-4 xz: 5e-5 yx: 8e-5 yy: 2e-4 yz: -6e-5\n"
      "           zx: -4e-5 zy: 1e-4 zz: 1.5e-4 }\n"
      "}\n"
      "sensors {\n"
      "  fluxgate { noise_rms_nT: 0.05 }\n";
  if (s.scalar) {
    text += "  scalar { noise_rms_nT: " + std::to_string(s.scalar_noise_nT) +
            " lag_s: " + std::to_string(s.lag_s) + " decimals: 4 }\n";
  }
  text +=
      "}\n"
      "environment { geology { rms_nT: 3 } diurnal { amplitude_nT: 5 } }\n"
      "turbulence { roll_rms_deg: 0.1 pitch_rms_deg: 0.05 heading_rms_deg: 0.05 }\n";
  if (s.spike_fraction > 0) {
    text += "faults { spikes { fraction: " + std::to_string(s.spike_fraction) +
            " amplitude_nT: " + std::to_string(s.spike_amplitude_nT) + " } }\n";
  }
  text += "compensation_box { cycles: " + std::to_string(s.cycles) +
          " settle_s: " + std::to_string(s.settle_s) + " }\n";
  text += s.extra;
  return text;
}

// A car with a magnetometer on a short boom driving a square loop: large
// permanent and induced fields, heading changes only (road slopes give a
// little pitch and roll).
inline std::string VehicleLoopText(unsigned seed = 5) {
  return "name: \"test vehicle\"\n"
         "seed: " + std::to_string(seed) + "\n"
         "sample_rate_hz: 10\n"
         "date: \"2025-06-14\"\n"
         "start_lat_deg: -31.95 start_lon_deg: 141.45 start_alt_m: 150\n"
         "platform {\n"
         "  kind: GROUND_VEHICLE\n"
         "  permanent_nT { x: 300 y: -120 z: 450 }\n"
         "  induced { xx: 3e-3 xy: 4e-4 xz: -6e-4 yx: 2e-4 yy: -2e-3 yz: 5e-4\n"
         "            zx: -7e-4 zy: 3e-4 zz: 4e-3 }\n"
         "  eddy_s { xx: 1e-4 yy: 1e-4 }\n"
         "}\n"
         "sensors { fluxgate { noise_rms_nT: 0.05 } scalar { noise_rms_nT: 0.01 } }\n"
         "turbulence { heading_rms_deg: 0.2 }\n"
         "vehicle_loop { laps: 3 }\n";
}

// Band-passed compensated field of a recording for given coefficients,
// computed independently of FitModel: term rows from the shared builder,
// f aligned by the lag, each gap-free stretch filtered on its own, the
// first and last `trim` samples of each stretch set to NaN.
inline std::vector<double> BandPassedCompensated(
    const io::Table& rec, const models::TermEngine::Options& engine,
    const BandPassOptions& band, const std::vector<double>& values,
    double lag_s, std::size_t trim) {
  const auto& t = rec.Column("time");
  const std::size_t n = t.size();
  const double* f = rec.Has("f") ? rec.Column("f").data() : nullptr;
  const models::TermMatrix tm = models::BuildTermMatrix(
      engine, n, t.data(), rec.Column("bx").data(), rec.Column("by").data(),
      rec.Column("bz").data(), f, {}, values.data());
  std::vector<double> field(n);
  for (std::size_t i = 0; i < n; ++i) field[i] = f ? f[i] : tm.bt[i];
  if (lag_s != 0.0) {
    field = ShiftByLag(t, field, lag_s, engine.sample_rate_hz, engine.gap_factor);
  }
  std::vector<double> comp(n, NAN);
  for (std::size_t i = 0; i < n; ++i) {
    if (!(tm.flags[i] & models::kFlagDerivativeInvalid)) {
      comp[i] = field[i] - tm.interference[i];
    }
  }
  const BandPass bp(band, engine.sample_rate_hz);
  std::vector<double> out = bp.FilterWithGaps(comp);
  // Trim the filter transients at the ends of each finite stretch.
  std::size_t i = 0;
  while (i < n) {
    if (!std::isfinite(out[i])) {
      ++i;
      continue;
    }
    std::size_t j = i;
    while (j < n && std::isfinite(out[j])) ++j;
    for (std::size_t q = i; q < std::min(j, i + trim); ++q) out[q] = NAN;
    for (std::size_t q = (j > trim ? std::max(i, j - trim) : i); q < j; ++q) out[q] = NAN;
    i = j;
  }
  return out;
}

}  // namespace fluxtrim::core::testing
