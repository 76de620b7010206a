#include "models/compensator.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

namespace fluxtrim::models {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Catmull-Rom cubic through p1 (t = 0) and p2 (t = 1), with the central
// differences of p0..p3 as slopes: the interpolant of
// ceres::CubicInterpolator (cubic Hermite, Keys 1981 with a = -0.5).
double CatmullRom(double p0, double p1, double p2, double p3, double t) {
  return p1 + 0.5 * t * (p2 - p0) +
         t * t * (p0 - 2.5 * p1 + 2.0 * p2 - 0.5 * p3) +
         t * t * t * (1.5 * (p1 - p2) + 0.5 * (p3 - p0));
}

}  // namespace

Compensator::Compensator(const CompensatorModel& model)
    : model_(model), sensor_(model.sensor), engine_(model.engine) {
  if (model_.coefficients.size() != engine_.term_count()) {
    throw std::invalid_argument("model has " +
                                std::to_string(model_.coefficients.size()) +
                                " coefficients for " +
                                std::to_string(engine_.term_count()) +
                                " terms");
  }
  if (!std::isfinite(model_.lag_s) ||
      std::abs(model_.lag_s) * model_.engine.sample_rate_hz > 1000.0) {
    throw std::invalid_argument("lag must be finite and under 1000 samples");
  }
  engine_.SetCoefficients(model_.coefficients.data());
  const double u = model_.lag_s * model_.engine.sample_rate_hz;
  lag_floor_ = static_cast<int>(std::floor(u));
  lag_frac_ = u - lag_floor_;
  lag_zero_ = model_.lag_s == 0.0;
  const int k = engine_.half_width();
  const int reach = std::abs(lag_floor_) + 3;
  // A power-of-two ring: slots are masks, not divisions.
  std::size_t slots = 1;
  while (slots < static_cast<std::size_t>(2 * (k + reach) + 8)) slots *= 2;
  ring_.resize(slots);
  ring_mask_ = slots - 1;
  attitude_outside_.assign(ring_.size(), 0);
  engine_out_.resize(static_cast<std::size_t>(engine_.max_outputs()));
  max_outputs_ = engine_.max_outputs() + std::max(0, lag_floor_ + 2) + 2;
}

void Compensator::SetCoefficients(const double* coefficients) {
  std::copy(coefficients, coefficients + term_count(),
            model_.coefficients.begin());
  engine_.SetCoefficients(coefficients);
}

void Compensator::SetCoefficients(const double* coefficients,
                                  double interference_mean_nT) {
  SetCoefficients(coefficients);
  model_.interference_mean_nT = interference_mean_nT;
}

void Compensator::KeepTermRows() {
  keep_rows_ = true;
  rows_.assign(ring_.size() * term_count(), 0.0);
}

int Compensator::latency_samples() const {
  return engine_.half_width() + (lag_zero_ ? 0 : std::max(0, lag_floor_ + 2));
}

inline Compensator::Record Compensator::ToRecord(const TermEngine::Output& o) const {
  Record r;
  r.index = o.index;
  r.segment = o.segment;
  r.time = o.time;
  r.bt = o.bt;
  r.f = model_.scalar_sensor ? o.f : o.bt;
  r.h = o.interference - model_.interference_mean_nT;
  r.flags = o.flags;
  if (attitude_outside_[static_cast<std::size_t>(o.index & ring_mask_)]) {
    r.flags |= kFlagAttitudeOutside;
  }
  return r;
}

inline void Compensator::WriteSample(const Record& rec, double f,
                                     CompensatedSample* out) {
  CompensatedSample& s = *out;
  s.index = rec.index;
  s.time = rec.time;
  s.bt = rec.bt;
  s.flags = rec.flags;
  s.f_interference = rec.h;
  s.f_comp = std::isfinite(rec.h) ? f - rec.h : kNaN;
}

inline int Compensator::Take(int ready, bool flushing, CompensatedSample* out) {
  if (lag_zero_ && !keep_rows_) {
    // Without a lag an output needs no later sample: straight from the
    // engine's outputs, without the round trip through the ring.
    for (int i = 0; i < ready; ++i) {
      const Record r = ToRecord(engine_out_[static_cast<std::size_t>(i)]);
      WriteSample(r, r.f, &out[i]);
    }
    received_ += static_cast<std::uint64_t>(ready);
    emitted_ = received_;
    return ready;
  }
  for (int i = 0; i < ready; ++i) Store(engine_out_[static_cast<std::size_t>(i)]);
  return Drain(flushing, out, 0);
}

int Compensator::Push(double time, const double b[3], double f,
                      const double* aux, double roll_deg, double pitch_deg,
                      double temp_c, CompensatedSample* out) {
  double field[3] = {b[0], b[1], b[2]};
  if (model_.has_sensor) {
    const Vec3 v = sensor_({b[0], b[1], b[2]}, temp_c);
    field[0] = v.x;
    field[1] = v.y;
    field[2] = v.z;
  }
  // The attitude flag is decided now and picked up when the engine emits
  // this sample (at most k + 1 pushes later, well inside the ring).
  // (Comparisons with NaN are false: a missing angle is never outside;
  // bitwise | keeps the check free of branches.)
  bool outside = false;
  if (model_.has_attitude_range) {
    outside = (roll_deg < model_.roll_min_deg) | (roll_deg > model_.roll_max_deg) |
              (pitch_deg < model_.pitch_min_deg) | (pitch_deg > model_.pitch_max_deg);
  }
  attitude_outside_[static_cast<std::size_t>(pushed_ & ring_mask_)] =
      outside ? 1 : 0;
  ++pushed_;
  const double scalar = model_.scalar_sensor ? f : kNaN;
  const int ready = engine_.Push(time, field, scalar, aux, engine_out_.data());
  return Take(ready, false, out);
}

int Compensator::Flush(CompensatedSample* out) {
  const int ready = engine_.Flush(engine_out_.data());
  return Take(ready, true, out);
}

void Compensator::Store(const TermEngine::Output& o) {
  ring_[static_cast<std::size_t>(o.index & ring_mask_)] = ToRecord(o);
  if (keep_rows_) {
    std::copy(o.row, o.row + term_count(),
              rows_.begin() + static_cast<std::ptrdiff_t>(
                                  (o.index & ring_mask_) * term_count()));
  }
  ++received_;
}

int Compensator::Drain(bool flushing, CompensatedSample* out, int n) {
  const std::uint64_t reach_hi =
      lag_zero_ ? 0 : static_cast<std::uint64_t>(std::max(0, lag_floor_ + 2));
  while (emitted_ < received_) {
    const std::uint64_t r = emitted_;
    const Record& rec = At(r);
    const bool segment_closed = At(received_ - 1).segment != rec.segment;
    if (!flushing && !segment_closed && received_ <= r + reach_hi) break;
    Finish(r, out + n);
    ++n;
    ++emitted_;
  }
  return n;
}

void Compensator::Finish(std::uint64_t r, CompensatedSample* out) {
  const Record& rec = At(r);
  double f = rec.f;
  bool clamped = false;
  if (!lag_zero_ && std::isfinite(rec.h)) {
    // Bounds of this sample's segment within reach.
    const std::int64_t lo_reach = static_cast<std::int64_t>(r) + lag_floor_ - 1;
    const std::int64_t hi_reach = static_cast<std::int64_t>(r) + lag_floor_ + 2;
    std::int64_t lo = static_cast<std::int64_t>(r);
    while (lo > 0 && lo > lo_reach &&
           At(static_cast<std::uint64_t>(lo - 1)).segment == rec.segment) {
      --lo;
    }
    std::int64_t hi = static_cast<std::int64_t>(r);
    while (hi + 1 < static_cast<std::int64_t>(received_) && hi < hi_reach &&
           At(static_cast<std::uint64_t>(hi + 1)).segment == rec.segment) {
      ++hi;
    }
    double p[4];
    for (int j = 0; j < 4; ++j) {
      std::int64_t q = static_cast<std::int64_t>(r) + lag_floor_ - 1 + j;
      if (q < lo || q > hi) {
        clamped = true;
        q = std::clamp(q, lo, hi);
      }
      p[j] = At(static_cast<std::uint64_t>(q)).f;
    }
    f = CatmullRom(p[0], p[1], p[2], p[3], lag_frac_);
  }
  WriteSample(rec, f, out);
  if (clamped) out->flags |= kFlagLagEdge;
}

}  // namespace fluxtrim::models
