#pragma once
// Between fit results and the model file (io/model_file.h): what `fit`
// writes and what `apply` and `stream` need back from it.

#include <map>
#include <string>
#include <vector>

#include "models/tolles_lawson.h"
#include "proto/model.pb.h"
#include "src/core/butterworth.h"
#include "src/core/fit.h"

namespace fluxtrim::core {

struct FitProvenance {
  std::string file;                              // recording fitted
  std::map<std::string, std::string> channel_map;  // --map name=COLUMN
  std::string tool_version;                      // FLUXTRIM_VERSION
};

// The model file content of a usable fit (schema_version 1; the sensor
// calibration is left unset).
proto::CompensationModel ModelFromFit(const FitResult& fit,
                                      const FitProvenance& provenance);

// Term-engine options of a model: terms (set + aux), k, rate, gap factor
// (1.5 when the file has none). Throws std::invalid_argument when the term
// set is unknown or the stored names differ from what the set produces.
models::TermEngine::Options EngineOptionsFromModel(
    const proto::CompensationModel& model);

// Coefficient values in term order (physical units).
std::vector<double> CoefficientsFromModel(const proto::CompensationModel& model);

// The band-pass the model was fitted with (for apply's metrics).
BandPassOptions BandFromModel(const proto::CompensationModel& model);

}  // namespace fluxtrim::core
