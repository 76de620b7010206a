#include "src/core/apply.h"

#include <algorithm>
#include <exception>
#include <cmath>
#include <stdexcept>
#include <limits>
#include <memory>
#include <sstream>

#include "io/error.h"
#include "io/memory_recording.h"
#include "io/sensor_file.h"
#include "models/tolles_lawson.h"

namespace fluxtrim::core {
namespace {

constexpr double kDegToRad = 3.14159265358979323846 / 180.0;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

bool UsesScalarSensor(const proto::CompensationModel& model) {
  return model.inputs().field_source() != "|B|";
}

std::string Join(const std::vector<std::string>& names) {
  std::string s;
  for (const std::string& n : names) s += (s.empty() ? "" : ", ") + n;
  return s;
}

// Feeds rows of a table (any table with the recording's schema) to a
// compensator, block by block: the one place that maps channels to
// Compensator::PushBlock columns, for the chunked and the in-memory paths
// alike.
class RowPusher {
 public:
  // observed: an observer sees the outputs and may change the coefficients
  // after any sample, as in a stream; then samples go in one at a time and
  // the outputs carry their time. Otherwise kMaxBlock samples per block.
  RowPusher(const proto::CompensationModel& model, const io::Table& schema,
            models::Compensator* compensator, bool observed)
      : compensator_(compensator),
        block_(observed ? 1 : models::Compensator::kMaxBlock) {
    i_time_ = schema.Find("time");
    i_bx_ = schema.Find("bx");
    i_by_ = schema.Find("by");
    i_bz_ = schema.Find("bz");
    i_f_ = compensator->model().scalar_sensor ? schema.Find("f") : -1;
    i_roll_ = schema.Find("roll");
    i_pitch_ = schema.Find("pitch");
    if (model.has_sensor() && !model.sensor().temperature_channel().empty()) {
      i_temp_ = schema.Find(model.sensor().temperature_channel());
    }
    for (int a = 0; a < model.terms().aux_size(); ++a) {
      i_aux_.push_back(schema.Find(model.terms().aux(a)));
    }
    aux_.resize(i_aux_.size());
    const std::size_t m = compensator->max_block_outputs();
    if (observed) {
      time_.resize(m);
      out_.time = time_.data();
    }
    f_comp_.resize(m);
    f_int_.resize(m);
    flags_.resize(m);
    out_.f_comp = f_comp_.data();
    out_.f_interference = f_int_.data();
    out_.flags = flags_.data();
  }

  // Pushes rows [begin, end) of `table`; after each block,
  // `sink(columns, n)` receives the n samples that came out (f_comp,
  // f_interference, flags; time when observed).
  template <typename Sink>
  void Push(const io::Table& table, std::size_t begin, std::size_t end,
            Sink&& sink) {
    auto col = [&table](int i) -> const double* {
      return i < 0 ? nullptr
                   : table.channel(static_cast<std::size_t>(i)).values.data();
    };
    const double *t = col(i_time_), *bx = col(i_bx_), *by = col(i_by_),
                 *bz = col(i_bz_), *f = col(i_f_), *roll = col(i_roll_),
                 *pitch = col(i_pitch_), *temp = col(i_temp_);
    auto at = [](const double* c, std::size_t r) {
      return c ? c + r : nullptr;
    };
    for (std::size_t r = begin; r < end; r += block_) {
      const std::size_t len = std::min(block_, end - r);
      for (std::size_t a = 0; a < aux_.size(); ++a) {
        aux_[a] = col(i_aux_[a]) + r;
      }
      models::SampleColumns in;
      in.time = t + r;
      in.bx = bx + r;
      in.by = by + r;
      in.bz = bz + r;
      in.f = at(f, r);
      in.roll_deg = at(roll, r);
      in.pitch_deg = at(pitch, r);
      in.temp_c = at(temp, r);
      in.aux = aux_.data();
      const std::size_t n = compensator_->PushBlock(len, in, out_);
      if (n > 0) sink(out_, n);
    }
  }

  // End of input: the samples still pending.
  template <typename Sink>
  void Flush(Sink&& sink) {
    const std::size_t n = compensator_->FlushBlock(out_);
    if (n > 0) sink(out_, n);
  }

 private:
  models::Compensator* compensator_;
  std::size_t block_;
  int i_time_ = -1, i_bx_ = -1, i_by_ = -1, i_bz_ = -1, i_f_ = -1,
      i_roll_ = -1, i_pitch_ = -1, i_temp_ = -1;
  std::vector<int> i_aux_;
  std::vector<const double*> aux_;
  std::vector<double> time_, f_comp_, f_int_;
  std::vector<std::uint32_t> flags_;
  models::CompensatedColumns out_;
};

}  // namespace

models::CompensatorModel ToCompensatorModel(
    const proto::CompensationModel& model, const std::string& source) {
  models::CompensatorModel m;
  try {
    m.engine.terms = models::ParseTermSet(model.terms().set());
  } catch (const std::invalid_argument& e) {
    throw io::InputError(source, "terms", e.what());
  }
  m.engine.terms.aux.assign(model.terms().aux().begin(),
                            model.terms().aux().end());
  m.engine.half_width = model.derivative_half_width();
  m.engine.sample_rate_hz = model.sample_rate_hz();
  if (model.gap_factor() > 0) m.engine.gap_factor = model.gap_factor();
  const std::vector<std::string> names = models::TermNames(m.engine.terms);
  if (static_cast<std::size_t>(model.coefficients_size()) != names.size()) {
    throw io::InputError(source, "coefficients",
                         "expected " + std::to_string(names.size()) +
                             " coefficients for the term set '" +
                             model.terms().set() + "', found " +
                             std::to_string(model.coefficients_size()));
  }
  for (std::size_t i = 0; i < names.size(); ++i) {
    const proto::Coefficient& c = model.coefficients(static_cast<int>(i));
    if (c.name() != names[i] || !std::isfinite(c.value())) {
      throw io::InputError(source, "coefficients",
                           "expected a finite coefficient '" + names[i] +
                               "' at position " + std::to_string(i + 1) +
                               ", found '" + c.name() + "'");
    }
    m.coefficients.push_back(c.value());
  }
  m.lag_s = model.lag_s();
  m.interference_mean_nT = model.interference_mean_nt();
  m.scalar_sensor = UsesScalarSensor(model);
  if (model.attitude().present()) {
    m.has_attitude_range = true;
    m.roll_min_deg = model.attitude().roll_min_deg();
    m.roll_max_deg = model.attitude().roll_max_deg();
    m.pitch_min_deg = model.attitude().pitch_min_deg();
    m.pitch_max_deg = model.attitude().pitch_max_deg();
  }
  if (model.has_sensor()) {
    const proto::SensorCalibration& s = model.sensor();
    // The same content checks as a sensor file (gains positive, angles
    // below 45 deg, ...): a hand-edited model must not give NaN output.
    io::CheckSensorCalibration(s, source, "sensor.");
    m.has_sensor = true;
    auto set3 = [](const proto::Vector3& v, double scale, double* out) {
      out[0] = v.x() * scale;
      out[1] = v.y() * scale;
      out[2] = v.z() * scale;
    };
    set3(s.gains(), 1.0, m.sensor.gains);
    set3(s.offsets_nt(), 1.0, m.sensor.offsets_nT);
    set3(s.nonorthogonality_deg(), kDegToRad, m.sensor.nonorthogonality_rad);
    if (s.has_misalignment()) {
      set3(s.misalignment_deg(), kDegToRad, m.sensor.misalignment_rad);
    }
    set3(s.gain_tc_per_k(), 1.0, m.sensor.gain_tc_per_K);
    set3(s.offset_tc_nt_per_k(), 1.0, m.sensor.offset_tc_nT_per_K);
    m.sensor.reference_temp_c = s.reference_temp_c();
  }
  return m;
}

std::vector<std::string> RequiredChannels(
    const proto::CompensationModel& model) {
  std::vector<std::string> names = {"time", "bx", "by", "bz"};
  if (UsesScalarSensor(model)) names.push_back("f");
  for (const std::string& aux : model.terms().aux()) names.push_back(aux);
  if (model.has_sensor() && !model.sensor().temperature_channel().empty()) {
    names.push_back(model.sensor().temperature_channel());
  }
  return names;
}

double MedianRateHz(const std::vector<double>& time, std::size_t rows) {
  const std::size_t n = std::min(rows, time.size());
  std::vector<double> steps;
  steps.reserve(n);
  for (std::size_t i = 1; i < n; ++i) {
    const double dt = time[i] - time[i - 1];
    if (dt > 0 && std::isfinite(dt)) steps.push_back(dt);
  }
  if (steps.empty()) return kNaN;
  const std::size_t mid = steps.size() / 2;
  std::nth_element(steps.begin(), steps.begin() + static_cast<std::ptrdiff_t>(mid),
                   steps.end());
  return 1.0 / steps[mid];
}

void CheckRecordingFitsModel(const proto::CompensationModel& model,
                             const io::Table& first_chunk,
                             const std::string& file, double max_rate_error,
                             std::size_t rate_rows) {
  std::vector<std::string> missing;
  for (const std::string& name : RequiredChannels(model)) {
    if (!first_chunk.Has(name)) missing.push_back(name);
  }
  if (!missing.empty()) {
    std::vector<std::string> have;
    for (const io::ChannelInfo& c : first_chunk.Schema()) have.push_back(c.name);
    throw io::InputError(
        file, "channels",
        "the model needs channel(s) " + Join(missing) +
            " that the recording lacks (it has " + Join(have) +
            "); map other column names with --map NAME=COLUMN");
  }
  const double rate = MedianRateHz(first_chunk.Column("time"), rate_rows);
  if (!std::isfinite(rate)) {
    throw io::InputError(file, "time",
                         "expected at least two increasing times to measure "
                         "the sample rate");
  }
  const double error = rate / model.sample_rate_hz() - 1.0;
  if (std::abs(error) > max_rate_error) {
    std::ostringstream msg;
    msg << "sample rate " << rate << " Hz differs from the model's "
        << model.sample_rate_hz() << " Hz by " << 100.0 * error
        << " % (limit " << 100.0 * max_rate_error
        << " %): fit a model at this rate or resample the recording";
    throw io::InputError(file, "sample rate", msg.str());
  }
}

std::vector<io::ChannelInfo> OutputSchema(
    const std::vector<io::ChannelInfo>& input) {
  std::vector<io::ChannelInfo> schema = input;
  for (const char* name : {"f_comp", "f_interference", "flags"}) {
    for (const io::ChannelInfo& c : input) {
      if (io::EqualsIgnoreCase(c.name, name)) {
        throw io::InputError("", "channels",
                             std::string("the recording already has a channel '") +
                                 name + "'; rename it with --map");
      }
    }
  }
  schema.push_back({"f_comp", "nT", "compensated total field"});
  schema.push_back({"f_interference", "nT",
                    "modelled platform interference, model mean removed"});
  schema.push_back({"flags", "", "per-sample flags (see fluxtrim apply --help)"});
  return schema;
}

ApplyResult ApplyChunked(const proto::CompensationModel& model,
                         io::RecordingReader& reader,
                         io::RecordingWriter& writer,
                         const ApplyOptions& options) {
  const std::string& file = reader.path();
  models::Compensator compensator(ToCompensatorModel(model, file));
  ApplyResult result;
  result.latency_samples = compensator.latency_samples();
  if (options.observe) compensator.KeepTermRows();

  io::Table chunk(reader.channels());
  io::Table pending(reader.channels());  // inputs still waiting for output
  io::Table out(OutputSchema(reader.channels()));
  std::vector<models::CompensatedSample> observed(
      options.observe ? compensator.max_block_outputs() : 0);
  std::vector<double> f_comp, f_int, flags;

  bool checked = false;
  std::unique_ptr<RowPusher> pusher;

  auto collect = [&](const models::CompensatedColumns& o, std::size_t n) {
    if (options.observe) {
      models::ToSamples(o, n, compensator.emitted() - n, observed.data());
      options.observe(compensator, observed.data(), static_cast<int>(n));
    }
    for (std::size_t r = 0; r < n; ++r) {
      f_comp.push_back(o.f_comp[r]);
      f_int.push_back(o.f_interference[r]);
      flags.push_back(static_cast<double>(o.flags[r]));
      if (o.flags[r]) ++result.flagged;
    }
  };
  // Writes the pending rows whose outputs have arrived.
  auto write_done = [&]() {
    const std::size_t done = f_comp.size();
    if (done == 0) return;
    out.ClearRows();
    for (std::size_t c = 0; c < pending.cols(); ++c) {
      const auto& src = pending.channel(c).values;
      out.channel(c).values.assign(src.begin(),
                                   src.begin() + static_cast<std::ptrdiff_t>(done));
    }
    const std::size_t base = pending.cols();
    out.channel(base).values = f_comp;
    out.channel(base + 1).values = f_int;
    out.channel(base + 2).values = flags;
    writer.Write(out);
    pending.Slice(done, pending.rows());
    result.samples += done;
    f_comp.clear();
    f_int.clear();
    flags.clear();
    if (options.progress) options.progress(result.samples);
  };

  // Rows of `pending` already pushed into the compensator.
  std::size_t pushed = 0;
  auto push_pending = [&]() {
    pusher->Push(pending, pushed, pending.rows(), collect);
    pushed = pending.rows();
  };
  // The sample rate is checked on the first rate_check_rows samples (or the
  // whole recording when shorter), whatever the chunk size.
  const std::size_t rate_rows = std::max<std::size_t>(options.rate_check_rows, 3);
  bool more = true;
  std::exception_ptr fault;
  while (more) {
    try {
      more = reader.ReadChunk(&chunk, options.chunk_rows) > 0;
    } catch (const io::InputError&) {
      // Deliver what was accepted before the fault, then report it.
      fault = std::current_exception();
      more = false;
    }
    if (more) pending.Append(chunk);
    if (!checked) {
      if (more && pending.rows() < rate_rows) continue;
      if (pending.rows() == 0 || (fault && pending.rows() < 3)) break;
      CheckRecordingFitsModel(model, pending, file);
      pusher = std::make_unique<RowPusher>(model, pending, &compensator,
                                           static_cast<bool>(options.observe));
      checked = true;
    }
    push_pending();
    const std::size_t written_before = result.samples;
    write_done();
    pushed -= result.samples - written_before;
  }
  if (!checked) {
    if (fault) std::rethrow_exception(fault);
    throw io::InputError(file, 0, 0, "expected samples, found none");
  }
  pusher->Flush(collect);
  write_done();
  writer.Close();
  if (fault) std::rethrow_exception(fault);
  return result;
}

io::Table ApplyInMemory(const proto::CompensationModel& model,
                        io::Table recording, const std::string& file) {
  // The same steps as ApplyChunked with the whole table as one chunk
  // (tests/core/apply_test checks the outputs are equal bit for bit),
  // without its staging copies: the input columns move into the output.
  if (recording.rows() == 0) {
    throw io::InputError(file, 0, 0, "expected samples, found none");
  }
  // The rate on the first chunk's rows, as ApplyChunked decides it with its
  // default chunk size.
  CheckRecordingFitsModel(model, recording, file, 0.01, ApplyOptions().chunk_rows);
  io::Table out(OutputSchema(recording.Schema()));
  const std::size_t base = recording.cols(), n = recording.rows();
  for (std::size_t c = 0; c < base; ++c) {
    out.channel(c).values = std::move(recording.channel(c).values);
  }
  // Outputs leave the compensator in input order, one per input sample:
  // appended, not written over a zero-filled column.
  std::vector<double>& f_comp = out.channel(base).values;
  std::vector<double>& f_int = out.channel(base + 1).values;
  std::vector<double>& flags = out.channel(base + 2).values;
  for (std::vector<double>* v : {&f_comp, &f_int, &flags}) v->reserve(n);

  models::Compensator compensator(ToCompensatorModel(model, file));
  RowPusher pusher(model, out, &compensator, /*observed=*/false);
  auto store = [&](const models::CompensatedColumns& o, std::size_t count) {
    f_comp.insert(f_comp.end(), o.f_comp, o.f_comp + count);
    f_int.insert(f_int.end(), o.f_interference, o.f_interference + count);
    for (std::size_t k = 0; k < count; ++k) {
      flags.push_back(static_cast<double>(o.flags[k]));
    }
  };
  pusher.Push(out, 0, n, store);
  pusher.Flush(store);
  if (f_comp.size() != n) throw std::logic_error("compensator lost samples");
  return out;
}

}  // namespace fluxtrim::core
