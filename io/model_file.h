#pragma once
// The compensation model file: protobuf text format of
// fluxtrim.proto.CompensationModel (io/proto/model.proto), versioned by
// schema_version. Written by `fit`, read by `apply`, `stream` and reports.

#include <string>

#include "proto/model.pb.h"

namespace fluxtrim::io {

// Schema version this build writes and reads.
inline constexpr unsigned kModelSchemaVersion = 1;

// Parses model text. Throws InputError naming source_name, line and column
// for a syntax error or unknown field, and naming the version when
// schema_version is missing or not kModelSchemaVersion. Also checks the
// content is usable: a positive sample rate, derivative half-width >= 1, a
// valid band, and one finite coefficient per term name.
proto::CompensationModel ParseModelText(const std::string& text,
                                        const std::string& source_name);

// Reads a model file (InputError when it cannot be opened, see above).
proto::CompensationModel ReadModelFile(const std::string& path);

// Text form with a comment header that explains units, scaling, the lag
// sign and the compensation formula. Round-trips every double exactly.
std::string FormatModelText(const proto::CompensationModel& model);

// Writes FormatModelText to path (atomically: a temporary file renamed into
// place). Throws std::runtime_error naming the path on failure.
void WriteModelFile(const std::string& path,
                    const proto::CompensationModel& model);

}  // namespace fluxtrim::io
