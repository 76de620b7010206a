// fluxtrim calibrate REC -o SENSOR: fluxgate calibration (gains, offsets,
// non-orthogonality; misalignment with attitude; temperature and current
// couplings on request). The numerics live in src/core/calibrate.h.
#include <cmath>
#include <iostream>
#include <memory>
#include <stdexcept>
#include <string>
#include <vector>

#include "fluxtrim/version.h"
#include "io/error.h"
#include "io/sensor_file.h"
#include "models/wmm.h"
#include "src/cli/commands.h"
#include "src/cli/common.h"
#include "src/core/calibrate.h"
#include "src/core/cautions.h"

namespace fluxtrim::cli {
namespace {

struct CalibrateArgs {
  std::string recording;
  std::string output;
  std::string date;
  std::string reference = "auto";
  bool vector = false;
  bool scalar = false;
  std::string temperature;
  std::vector<std::string> aux;
  std::string summary_json;
  double max_std_error_nT = 2.0;
  InputArgs input;
};

int RunCalibrate(const CalibrateArgs& args) {
  if (args.vector && args.scalar) {
    throw CLI::ValidationError("--vector", "cannot be combined with --scalar");
  }
  core::CalibrateOptions options;
  if (!args.date.empty()) {
    try {
      options.decimal_year = models::ParseDecimalYear(args.date);
    } catch (const std::invalid_argument& e) {
      throw CLI::ValidationError("--date", e.what());
    }
  }
  if (args.vector && args.date.empty()) {
    throw CLI::ValidationError(
        "--vector", "needs --date YYYY-MM-DD (the WMM2025 field direction)");
  }
  options.mode = args.vector   ? core::CalibrateOptions::Mode::kVector
                 : args.scalar ? core::CalibrateOptions::Mode::kScalar
                               : core::CalibrateOptions::Mode::kAuto;
  options.use_scalar_sensor = args.reference != "wmm";
  options.temperature_channel = args.temperature;
  options.aux_channels = args.aux;
  options.max_std_error_nT = args.max_std_error_nT;
  options.source = args.recording;
  std::string invalid;
  if (!options.IsValid(&invalid)) {
    throw CLI::ValidationError("calibrate", invalid);
  }

  io::ReadOptions read = MakeReadOptions(args.input);
  read.required = {"bx", "by", "bz"};
  if (args.reference == "f") read.required.push_back("f");
  if (args.vector) {
    for (const char* c : {"roll", "pitch", "heading", "lat", "lon", "alt"}) {
      read.required.push_back(c);
    }
  }
  if (!args.temperature.empty()) read.required.push_back(args.temperature);
  for (const std::string& a : args.aux) read.required.push_back(a);
  const io::Table table = io::ReadRecording(args.recording, read);

  const bool reference_is_f = args.reference != "wmm" && table.Has("f");
  if (!reference_is_f && args.date.empty()) {
    throw CLI::ValidationError(
        "--date",
        std::string(args.reference == "wmm"
                        ? "--reference wmm"
                        : "the recording has no scalar channel 'f', so the "
                          "reference is the WMM2025 magnitude, which") +
            " needs --date YYYY-MM-DD (and lat, lon, alt channels)");
  }

  core::CalibrateResult result;
  try {
    result = core::Calibrate(table, options);
  } catch (const std::invalid_argument& e) {
    throw io::InputError(args.recording, 0, 0, e.what());
  }
  // With the JSON on stdout the text summary goes to stderr.
  std::ostream& text = args.summary_json == "-" ? std::cerr : std::cout;
  text << core::FormatCalibrationSummary(result.summary);
  if (!args.summary_json.empty()) WriteJson(args.summary_json, result.summary);
  if (!result.summary.accepted()) {
    text << "nothing written to " << args.output << "\n"
         << core::kFlightCaution << "\n";
    return 1;
  }
  result.calibration.set_tool_version(FLUXTRIM_VERSION);
  io::WriteSensorFile(args.output, result.calibration);
  text << "wrote " << args.output << "\n" << core::kFlightCaution << "\n";
  return 0;
}

}  // namespace

void AddCalibrateCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<CalibrateArgs>();
  CLI::App* sub = app.add_subcommand(
      "calibrate",
      "Calibrate the fluxgate: gains, offsets, non-orthogonality (and, with "
      "attitude, misalignment), from a recording that turns and tilts the "
      "sensor through many field directions");
  sub->add_option("REC", args->recording,
                  "Recording (.csv, .dfn/.dat ASEG-GDF2, .ftrec) with bx, by, "
                  "bz (raw fluxgate, nT)")
      ->required();
  sub->add_option("-o,--output", args->output,
                  "Sensor calibration file to write (protobuf text format)")
      ->required();
  sub->add_option("--date", args->date,
                  "Date of the recording (YYYY-MM-DD or decimal year) for "
                  "WMM2025; required without an f channel and for --vector");
  sub->add_option("--reference", args->reference,
                  "Reference magnitude: f (scalar sensor), wmm (WMM2025 at "
                  "lat, lon, alt), auto (f when present)")
      ->check(CLI::IsMember({"auto", "f", "wmm"}))
      ->capture_default_str();
  sub->add_flag("--vector", args->vector,
                "Attitude-aided calibration (needs roll, pitch, heading, "
                "lat, lon, alt, --date); automatic when they are present");
  sub->add_flag("--scalar", args->scalar,
                "Magnitude-only calibration even when attitude is present");
  sub->add_option("--temperature", args->temperature,
                  "Temperature channel (deg C): fit linear temperature "
                  "coefficients of gains and offsets");
  sub->add_option("--aux", args->aux,
                  "Extra channels (currents) whose field at the sensor is "
                  "fitted, nT per unit (comma-separated)")
      ->delimiter(',');
  sub->add_option("--max-std-error-nT", args->max_std_error_nT,
                  "Refuse when a parameter's standard error times its "
                  "effect on the field exceeds this (nT)")
      ->capture_default_str();
  sub->add_option("--summary-json", args->summary_json,
                  "Also write the summary as JSON to PATH ('-' for stdout)");
  AddInputOptions(sub, &args->input);
  sub->callback([args, exit_code] { *exit_code = RunCalibrate(*args); });
}

}  // namespace fluxtrim::cli
