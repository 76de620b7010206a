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

void ToSamples(const CompensatedColumns& c, std::size_t n,
               std::uint64_t first_index, CompensatedSample* out) {
  for (std::size_t i = 0; i < n; ++i) {
    CompensatedSample& s = out[i];
    s.index = first_index + i;
    s.time = c.time ? c.time[i] : kNaN;
    s.f_comp = c.f_comp[i];
    s.f_interference = c.f_interference[i];
    s.bt = c.bt ? c.bt[i] : kNaN;
    s.flags = c.flags[i];
  }
}

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
  const std::size_t k = static_cast<std::size_t>(engine_.half_width());
  const std::size_t reach = static_cast<std::size_t>(std::abs(lag_floor_) + 3);
  max_outputs_ = engine_.max_outputs() + std::max(0, lag_floor_ + 2) + 2;
  // A power-of-two ring (slots are masks, not divisions) holding a block,
  // the records waiting for the lag and those the lag reads back.
  std::size_t slots = 1;
  while (slots < kMaxBlock + 2 * (k + reach) + 8) slots *= 2;
  ring_.resize(slots);
  ring_mask_ = slots - 1;
  attitude_outside_.assign(slots, 0);
  const std::size_t m = engine_.max_block_outputs();
  for (std::vector<double>* v :
       {&eng_time_, &eng_bt_, &eng_f_, &eng_interference_}) {
    v->assign(m, 0.0);
  }
  eng_flags_.assign(m, 0);
  eng_segment_.assign(m, 0);
  engine_cols_.time = eng_time_.data();
  engine_cols_.bt = eng_bt_.data();
  engine_cols_.f = eng_f_.data();
  engine_cols_.interference = eng_interference_.data();
  engine_cols_.flags = eng_flags_.data();
  engine_cols_.segment = eng_segment_.data();
  if (model_.has_sensor) {
    for (std::vector<double>* v : {&cal_x_, &cal_y_, &cal_z_}) {
      v->assign(kMaxBlock, 0.0);
    }
  }
  aux_columns_.assign(engine_.options().terms.aux.size(), nullptr);
  const std::size_t one = static_cast<std::size_t>(max_outputs_);
  for (std::vector<double>* v : {&one_time_, &one_f_comp_, &one_f_int_, &one_bt_}) {
    v->assign(one, 0.0);
  }
  one_flags_.assign(one, 0);
  one_ = {one_time_.data(), one_f_comp_.data(), one_f_int_.data(),
          one_bt_.data(), one_flags_.data()};
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
  eng_rows_.assign(engine_.max_block_outputs() * term_count(), 0.0);
  engine_cols_.rows = eng_rows_.data();
}

int Compensator::latency_samples() const {
  return engine_.half_width() + (lag_zero_ ? 0 : std::max(0, lag_floor_ + 2));
}

inline void Compensator::WriteSample(const Record& rec, double f,
                                     std::uint32_t flags,
                                     const CompensatedColumns& out,
                                     std::size_t i) {
  if (out.time) out.time[i] = rec.time;
  if (out.bt) out.bt[i] = rec.bt;
  if (out.flags) out.flags[i] = flags;
  if (out.f_interference) out.f_interference[i] = rec.h;
  if (out.f_comp) out.f_comp[i] = std::isfinite(rec.h) ? f - rec.h : kNaN;
}

std::size_t Compensator::PushBlock(std::size_t n, const SampleColumns& in,
                                   const CompensatedColumns& out) {
  if (n > kMaxBlock) {
    throw std::invalid_argument("Compensator::PushBlock: block longer than kMaxBlock");
  }
  const double *bx = in.bx, *by = in.by, *bz = in.bz;
  if (model_.has_sensor) {
    for (std::size_t i = 0; i < n; ++i) {
      const double temp =
          in.temp_c ? in.temp_c[i] : model_.sensor.reference_temp_c;
      const Vec3 v = sensor_({in.bx[i], in.by[i], in.bz[i]}, temp);
      cal_x_[i] = v.x;
      cal_y_[i] = v.y;
      cal_z_[i] = v.z;
    }
    bx = cal_x_.data();
    by = cal_y_.data();
    bz = cal_z_.data();
  }
  // The attitude flag is decided now and picked up when the engine emits
  // the sample (at most k + 1 + kMaxBlock pushes later, inside the ring).
  // Comparisons with NaN are false: a missing angle is never outside;
  // bitwise | keeps the check free of branches.
  for (std::size_t i = 0; i < n; ++i) {
    bool outside = false;
    if (model_.has_attitude_range) {
      const double roll = in.roll_deg ? in.roll_deg[i] : kNaN;
      const double pitch = in.pitch_deg ? in.pitch_deg[i] : kNaN;
      outside = (roll < model_.roll_min_deg) | (roll > model_.roll_max_deg) |
                (pitch < model_.pitch_min_deg) | (pitch > model_.pitch_max_deg);
    }
    attitude_outside_[static_cast<std::size_t>((pushed_ + i) & ring_mask_)] =
        outside ? 1 : 0;
  }
  pushed_ += n;
  const std::size_t ready =
      engine_.PushBlock(n, in.time, bx, by, bz,
                        model_.scalar_sensor ? in.f : nullptr, in.aux,
                        engine_cols_);
  return Take(ready, false, out);
}

std::size_t Compensator::FlushBlock(const CompensatedColumns& out) {
  return Take(engine_.FlushBlock(engine_cols_), true, out);
}

inline Compensator::Record Compensator::EngineRecord(
    std::size_t i, std::uint64_t index) const {
  Record r;
  r.segment = eng_segment_[i];
  r.time = eng_time_[i];
  r.bt = eng_bt_[i];
  r.f = model_.scalar_sensor ? eng_f_[i] : eng_bt_[i];
  r.h = eng_interference_[i] - model_.interference_mean_nT;
  r.flags = eng_flags_[i];
  if (attitude_outside_[static_cast<std::size_t>(index & ring_mask_)]) {
    r.flags |= kFlagAttitudeOutside;
  }
  return r;
}

std::size_t Compensator::Take(std::size_t ready, bool flushing,
                              const CompensatedColumns& out) {
  const std::uint64_t first = received_;
  if (keep_rows_) {
    for (std::size_t i = 0; i < ready; ++i) {
      const double* row = eng_rows_.data() + i * term_count();
      std::copy(row, row + term_count(),
                rows_.begin() + static_cast<std::ptrdiff_t>(
                                    ((first + i) & ring_mask_) * term_count()));
    }
  }
  received_ += ready;
  if (lag_zero_) {
    // Without a lag an output needs no later sample: straight from the
    // engine's outputs, without the round trip through the ring.
    for (std::size_t i = 0; i < ready; ++i) {
      const Record r = EngineRecord(i, first + i);
      WriteSample(r, r.f, r.flags, out, i);
    }
    emitted_ = received_;
    return ready;
  }
  for (std::size_t i = 0; i < ready; ++i) {
    ring_[static_cast<std::size_t>((first + i) & ring_mask_)] =
        EngineRecord(i, first + i);
  }
  return Drain(flushing, out);
}

std::size_t Compensator::Drain(bool flushing, const CompensatedColumns& out) {
  const std::uint64_t reach_hi =
      static_cast<std::uint64_t>(std::max(0, lag_floor_ + 2));
  std::size_t n = 0;
  while (emitted_ < received_) {
    const std::uint64_t r = emitted_;
    const Record& rec = At(r);
    const bool segment_closed = At(received_ - 1).segment != rec.segment;
    if (!flushing && !segment_closed && received_ <= r + reach_hi) break;
    bool clamped = false;
    const double f = std::isfinite(rec.h) ? LaggedF(r, &clamped) : rec.f;
    WriteSample(rec, f, clamped ? rec.flags | kFlagLagEdge : rec.flags, out, n);
    ++n;
    ++emitted_;
  }
  return n;
}

double Compensator::LaggedF(std::uint64_t r, bool* clamped) const {
  const Record& rec = At(r);
  const std::int64_t q0 = static_cast<std::int64_t>(r) + lag_floor_ - 1;
  // Most samples: the four readings and the sample itself lie in one
  // segment (segment numbers grow with the index, so the two ends decide).
  const std::int64_t first = std::min(q0, static_cast<std::int64_t>(r));
  const std::int64_t last = std::max(q0 + 3, static_cast<std::int64_t>(r));
  if (first >= 0 && last < static_cast<std::int64_t>(received_) &&
      At(static_cast<std::uint64_t>(first)).segment == rec.segment &&
      At(static_cast<std::uint64_t>(last)).segment == rec.segment) {
    const std::uint64_t q = static_cast<std::uint64_t>(q0);
    return CatmullRom(At(q).f, At(q + 1).f, At(q + 2).f, At(q + 3).f,
                      lag_frac_);
  }
  // Bounds of this sample's segment within reach of the four readings
  // q0 .. q0 + 3.
  const std::int64_t lo_reach = q0, hi_reach = q0 + 3;
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
    std::int64_t q = q0 + j;
    if (q < lo || q > hi) {
      *clamped = true;
      q = std::clamp(q, lo, hi);
    }
    p[j] = At(static_cast<std::uint64_t>(q)).f;
  }
  return CatmullRom(p[0], p[1], p[2], p[3], lag_frac_);
}

int Compensator::Push(double time, const double b[3], double f,
                      const double* aux, double roll_deg, double pitch_deg,
                      double temp_c, CompensatedSample* out) {
  // One sample as columns of length one.
  for (std::size_t a = 0; a < aux_columns_.size(); ++a) {
    aux_columns_[a] = aux + a;
  }
  SampleColumns in;
  in.time = &time;
  in.bx = &b[0];
  in.by = &b[1];
  in.bz = &b[2];
  in.f = &f;
  in.roll_deg = &roll_deg;
  in.pitch_deg = &pitch_deg;
  in.temp_c = &temp_c;
  in.aux = aux_columns_.data();
  const std::uint64_t first = emitted_;
  const std::size_t n = PushBlock(1, in, one_);
  ToSamples(one_, n, first, out);
  return static_cast<int>(n);
}

int Compensator::Flush(CompensatedSample* out) {
  const std::uint64_t first = emitted_;
  const std::size_t n = FlushBlock(one_);
  ToSamples(one_, n, first, out);
  return static_cast<int>(n);
}

}  // namespace fluxtrim::models
