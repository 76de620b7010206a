#pragma once
// Sample-by-sample compensation with a fitted model: the one engine behind
// `apply` (in memory and chunked), `stream` and the embeddable runtime, so
// that all three give the same numbers. Dependency-free, no allocation after
// construction.
//
//   f_interference(t) = H(t) - interference_mean_nT
//   f_comp(t)         = f(t + lag_s) - f_interference(t)
//
// H is the Tolles-Lawson interference of the model (tolles_lawson.h) built
// from the fluxgate (after the sensor calibration when the model has one).
// Without a scalar sensor, f is the (calibrated) fluxgate magnitude |B|.
// The lag is applied by Catmull-Rom cubic interpolation of f on the nominal
// sample grid of the sample's segment (the interpolant of
// ceres::CubicInterpolator); indices beyond the segment are clamped to its
// ends and the sample is flagged kFlagLagEdge.
//
// Latency: an output leaves latency_samples() samples after its input,
// k (the derivative half-width) plus what a positive lag needs.

#include <cstddef>
#include <cstdint>
#include <vector>

#include "models/fluxgate_sensor.h"
#include "models/tolles_lawson.h"

namespace fluxtrim::models {

// Set when the lag interpolation reached past the ends of the segment.
inline constexpr std::uint32_t kFlagLagEdge = 1u << 4;

struct CompensatorModel {
  TermEngine::Options engine;           // terms, k, nominal rate, gap factor
  std::vector<double> coefficients;     // physical units, one per term
  double lag_s = 0.0;
  double interference_mean_nT = 0.0;
  bool has_attitude_range = false;      // flag attitude outside the fit's range
  double roll_min_deg = 0, roll_max_deg = 0;
  double pitch_min_deg = 0, pitch_max_deg = 0;
  bool scalar_sensor = true;            // false: f is the fluxgate magnitude
  bool has_sensor = false;              // apply the sensor calibration first
  SensorCalibration sensor;
};

struct CompensatedSample {
  std::uint64_t index = 0;     // 0-based sequence number of the input sample
  double time = 0;             // s
  double f_comp = 0;           // nT (NaN for a bad sample)
  double f_interference = 0;   // nT, model mean level removed
  double bt = 0;               // total field used by the terms, nT
  std::uint32_t flags = 0;     // SampleFlag bits, kFlagLagEdge
};

// Input columns of Compensator::PushBlock: entry i of each array is sample
// i of the block. Null where the recording has no such channel: f (no scalar
// sensor), roll and pitch (no attitude check), temp (the calibration's
// reference temperature). aux: one column per model aux channel.
struct SampleColumns {
  const double* time = nullptr;
  const double* bx = nullptr;
  const double* by = nullptr;
  const double* bz = nullptr;
  const double* f = nullptr;
  const double* roll_deg = nullptr;
  const double* pitch_deg = nullptr;
  const double* temp_c = nullptr;
  const double* const* aux = nullptr;
};

// Output columns of Compensator::PushBlock and FlushBlock: entry i is the
// i-th output of the call (input sample index emitted() + i at the call),
// max_block_outputs() entries each; a null array is not written.
struct CompensatedColumns {
  double* time = nullptr;
  double* f_comp = nullptr;
  double* f_interference = nullptr;
  double* bt = nullptr;
  std::uint32_t* flags = nullptr;
};

// Outputs [0, n) of columns as samples, the first with index first_index
// (a null time or bt column gives NaN).
void ToSamples(const CompensatedColumns& columns, std::size_t n,
               std::uint64_t first_index, CompensatedSample* out);

class Compensator {
 public:
  // Throws std::invalid_argument when the model is inconsistent (coefficient
  // count, half-width, rate).
  explicit Compensator(const CompensatorModel& model);

  // One input sample. b: raw fluxgate (nT, body axes); f: scalar reading or
  // NaN when the platform has none; aux: one value per model aux channel
  // (null when none); roll_deg/pitch_deg: NaN when not recorded; temp_c:
  // sensor temperature (ignored unless the calibration has coefficients).
  // Writes the outputs now ready to out[0..n), in input order, returns n
  // (n <= max_outputs()).
  int Push(double time, const double b[3], double f, const double* aux,
           double roll_deg, double pitch_deg, double temp_c,
           CompensatedSample* out);
  // End of input: emits every pending sample.
  int Flush(CompensatedSample* out);

  // Samples [0, n) of columns, n <= kMaxBlock: the same outputs as n calls
  // of Push, bit for bit (a Push is a block of one). Returns the number of
  // outputs written to out (<= max_block_outputs()).
  static constexpr std::size_t kMaxBlock = TermEngine::kMaxBlock;
  std::size_t PushBlock(std::size_t n, const SampleColumns& in,
                        const CompensatedColumns& out);
  std::size_t FlushBlock(const CompensatedColumns& out);

  int max_outputs() const { return max_outputs_; }
  std::size_t max_block_outputs() const {
    return kMaxBlock + static_cast<std::size_t>(max_outputs_);
  }
  // Index of the next output (outputs returned so far).
  std::uint64_t emitted() const { return emitted_; }
  // Samples between an input and its output (fixed).
  int latency_samples() const;
  std::size_t term_count() const { return engine_.term_count(); }
  const CompensatorModel& model() const { return model_; }

  // Replaces the coefficients (physical units, term_count() values) from the
  // next sample the engine emits on; samples already past the engine keep
  // the old ones. Used by in-flight adaptation (core/adaptive.h); no
  // allocation.
  void SetCoefficients(const double* coefficients);
  // The same, and the level removed from H (nT, the model's
  // interference_mean_nT at start): adaptation keeps f_comp continuous
  // across a change of coefficients with it.
  void SetCoefficients(const double* coefficients,
                       double interference_mean_nT);

  // Term rows of emitted samples, for observers (core/adaptive.h). Off by
  // default (the hot path then copies nothing). When on, TermRow(s.index)
  // for every sample s returned by the last Push, Flush, PushBlock or
  // FlushBlock gives its row (term_count() values, column order of
  // tolles_lawson.h), valid until the next call. Call before the first
  // Push; allocates once.
  void KeepTermRows();
  const double* TermRow(std::uint64_t index) const {
    return rows_.data() +
           static_cast<std::size_t>(index & ring_mask_) * term_count();
  }

 private:
  struct Record {
    std::uint64_t segment;
    double time, f, h, bt;
    std::uint32_t flags;
  };
  // Turns the engine's `ready` outputs (in engine_cols_) into samples,
  // returns how many.
  std::size_t Take(std::size_t ready, bool flushing,
                   const CompensatedColumns& out);
  // Engine output i of the block (sample `index`) as the compensator keeps
  // it: f, h without the mean level, the attitude flag.
  Record EngineRecord(std::size_t i, std::uint64_t index) const;
  // The sample of a record, with f the scalar reading at the sample's time
  // (lag applied): f_comp = f - h (NaN for a bad sample).
  static void WriteSample(const Record& rec, double f, std::uint32_t flags,
                          const CompensatedColumns& out, std::size_t i);
  std::size_t Drain(bool flushing, const CompensatedColumns& out);
  // f at the time of record r plus the lag; sets *clamped when the
  // interpolation reached past the ends of the segment.
  double LaggedF(std::uint64_t r, bool* clamped) const;
  const Record& At(std::uint64_t index) const {
    return ring_[static_cast<std::size_t>(index & ring_mask_)];
  }

  CompensatorModel model_;
  SensorCorrector sensor_;  // model_.sensor, trigonometry done once
  TermEngine engine_;
  // Engine outputs of a block.
  std::vector<double> eng_time_, eng_bt_, eng_f_, eng_interference_,
      eng_rows_;
  std::vector<std::uint32_t> eng_flags_;
  std::vector<std::uint64_t> eng_segment_;
  TermEngine::Columns engine_cols_;
  // Calibrated fluxgate of a block, and Push's sample as columns.
  std::vector<double> cal_x_, cal_y_, cal_z_;
  std::vector<const double*> aux_columns_;
  // Outputs of Push and Flush, as columns.
  std::vector<double> one_time_, one_f_comp_, one_f_int_, one_bt_;
  std::vector<std::uint32_t> one_flags_;
  CompensatedColumns one_;
  std::vector<std::uint8_t> attitude_outside_;  // by index & ring_mask_
  std::vector<Record> ring_;  // records by index & ring_mask_ (with a lag)
  std::vector<double> rows_;  // by index & ring_mask_, when KeepTermRows()
  std::uint64_t ring_mask_ = 0;  // ring size (a power of two) - 1
  bool keep_rows_ = false;
  int lag_floor_ = 0;       // floor(lag / dt)
  double lag_frac_ = 0.0;   // lag / dt - floor
  bool lag_zero_ = true;
  std::uint64_t pushed_ = 0;     // input samples
  std::uint64_t received_ = 0;   // records stored from the engine
  std::uint64_t emitted_ = 0;    // records turned into outputs
  int max_outputs_ = 0;
};

}  // namespace fluxtrim::models
