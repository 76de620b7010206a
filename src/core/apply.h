#pragma once
// Applies a fitted compensation model to a recording, chunk by chunk in
// bounded memory, through models::Compensator (the engine shared with
// `stream` and the runtime), so the chunked result equals the in-memory one
// bit for bit.
//
// Output: every input channel, then
//   f_comp          compensated total field, nT
//   f_interference  modelled interference minus the model's mean level over
//                   its compensation flight (interference_mean_nT), nT; so
//                   f_comp = f(t + lag) - f_interference keeps the survey's
//                   absolute level
//   flags           bit set per sample (models/tolles_lawson.h SampleFlag,
//                   models/compensator.h kFlagLagEdge): 1 gap edge,
//                   2 derivative not yet valid, 4 attitude outside the range
//                   the fit saw, 8 bad sample, 16 lag reached a segment end

#include <cstddef>
#include <cstdint>
#include <functional>
#include <string>
#include <vector>

#include "io/recording.h"
#include "io/table.h"
#include "models/compensator.h"
#include "proto/model.pb.h"

namespace fluxtrim::core {

// Converts a model file to the engine's plain form. Throws io::InputError
// naming `source` when the model is inconsistent.
models::CompensatorModel ToCompensatorModel(
    const proto::CompensationModel& model, const std::string& source);

// Channels the model needs from a recording: time, bx, by, bz, f (when the
// model was fitted on a scalar sensor), aux channels, the sensor's
// temperature channel.
std::vector<std::string> RequiredChannels(
    const proto::CompensationModel& model);

// Refuses (io::InputError naming the file) a recording the model does not
// fit: a missing channel, or a median sample rate (over the first
// rate_rows rows) off the model's by more than max_rate_error (relative,
// default 1%).
void CheckRecordingFitsModel(const proto::CompensationModel& model,
                             const io::Table& first_chunk,
                             const std::string& file,
                             double max_rate_error = 0.01,
                             std::size_t rate_rows = SIZE_MAX);

// Median sample rate of the first `rows` times (Hz); NaN with fewer than
// two good steps.
double MedianRateHz(const std::vector<double>& time,
                    std::size_t rows = SIZE_MAX);

// Schema of the output: the input's plus f_comp, f_interference, flags.
std::vector<io::ChannelInfo> OutputSchema(
    const std::vector<io::ChannelInfo>& input);

struct ApplyOptions {
  std::size_t chunk_rows = 1u << 16;
  // Samples read before the sample rate is checked against the model's
  // (fewer when the recording is shorter). A stream uses a small number so
  // that output starts at once.
  std::size_t rate_check_rows = 256;
  // Called after each written chunk with the samples done so far.
  std::function<void(std::size_t samples)> progress;
  // Optional observer of the compensated samples, called with each batch
  // the compensator returns (n > 0), before they are written. When set, the
  // compensator keeps its term rows (Compensator::KeepTermRows) and the
  // observer may change its coefficients (in-flight adaptation,
  // core/adaptive.h). Unset: the output is exactly that without it.
  std::function<void(models::Compensator& compensator,
                     const models::CompensatedSample* samples, int n)>
      observe;
};

struct ApplyResult {
  std::size_t samples = 0;
  std::size_t flagged = 0;          // samples with any flag
  int latency_samples = 0;
};

// Streams reader -> compensation -> writer. The writer must have been
// created with OutputSchema(reader.channels()). When the reader throws on
// bad input, every sample accepted before it is still compensated, written
// and the writer closed; then the error is rethrown.
ApplyResult ApplyChunked(const proto::CompensationModel& model,
                         io::RecordingReader& reader,
                         io::RecordingWriter& writer,
                         const ApplyOptions& options = {});

// The same on a table in memory; returns the output table. The recording's
// columns become the output's input columns: pass it with std::move when it
// is not needed afterwards, and nothing is copied.
io::Table ApplyInMemory(const proto::CompensationModel& model,
                        io::Table recording,
                        const std::string& file = "<memory>");

}  // namespace fluxtrim::core
