// fluxtrim fit REC -o MODEL: Tolles-Lawson compensation fit of a
// compensation flight (the numerics live in src/core/fit.h).
#include <fstream>
#include <iostream>
#include <memory>
#include <sstream>
#include <string>
#include <vector>

#include "fluxtrim/version.h"
#include "io/error.h"
#include "io/model_file.h"
#include "io/sensor_file.h"
#include "src/cli/commands.h"
#include "src/cli/common.h"
#include "src/core/fit.h"
#include "src/core/fit_model.h"
#include "src/core/fit_report.h"
#include "src/core/fit_report_html.h"
#include "src/core/joint_fit.h"

namespace fluxtrim::cli {
namespace {

struct FitArgs {
  std::string recording;
  std::string model;
  std::string terms = "default";
  std::string aux;
  std::string ridge = "auto";
  std::string loss = "none";
  std::string segments;
  std::string band = "0.1,0.9";
  int order = 4;
  int half_width = 0;
  bool no_lag = false;
  double max_lag_s = 1.0;
  bool no_cross_validation = false;
  std::string summary_json;
  std::string report;
  std::string sensor;         // --sensor SENSOR
  bool joint_sensor = false;  // --joint-sensor
  std::string sensor_output;  // --sensor-output PATH (joint estimate)
  InputArgs input;
};

// The fit summary JSON with the sensor calibration the model holds, as
// "sensor" (the keys of the sensor file) and "sensor_source" ("file" or
// "joint"). The FitSummary message has no such field, so the object is
// extended here.
std::string SummaryJsonWithSensor(const std::string& summary_json,
                                  const proto::SensorCalibration& sensor,
                                  const std::string& sensor_source) {
  const std::size_t close = summary_json.rfind('}');
  if (close == std::string::npos) return summary_json;
  std::string sensor_json = ToJson(sensor);
  while (!sensor_json.empty() &&
         (sensor_json.back() == '\n' || sensor_json.back() == ' ')) {
    sensor_json.pop_back();
  }
  std::string head = summary_json.substr(0, close);
  while (!head.empty() && (head.back() == '\n' || head.back() == ' ')) {
    head.pop_back();
  }
  return head + ",\n \"sensor_source\": \"" + sensor_source +
         "\",\n \"sensor\": " + sensor_json + "\n}\n";
}

void WriteText(const std::string& path, const std::string& text) {
  if (path == "-") {
    std::cout << text;
    return;
  }
  std::ofstream out(path, std::ios::binary);
  out << text;
  out.close();
  if (!out) throw std::runtime_error(path + ": cannot write the JSON file");
}

core::FitOptions MakeFitOptions(const FitArgs& args) {
  core::FitOptions options;
  try {
    options.terms = models::ParseTermSet(args.terms);
  } catch (const std::invalid_argument& e) {
    throw CLI::ValidationError("--terms", e.what());
  }
  options.terms.aux = SplitComma(args.aux);
  if (args.ridge == "auto") {
    options.ridge_auto = true;
  } else {
    options.ridge_auto = false;
    options.ridge = ParseNumber("--ridge", args.ridge);
  }
  if (!core::ParseRobustLoss(args.loss, &options.loss)) {
    throw CLI::ValidationError("--loss", "expected none, huber or cauchy");
  }
  const std::vector<std::string> band = SplitComma(args.band);
  if (band.size() != 2) {
    throw CLI::ValidationError("--band", "expected LOW,HIGH in Hz, e.g. 0.1,0.9");
  }
  options.band.low_hz = ParseNumber("--band", band[0]);
  options.band.high_hz = ParseNumber("--band", band[1]);
  options.band.order = args.order;
  options.derivative_half_width = args.half_width;
  options.estimate_lag = !args.no_lag;
  options.max_lag_s = args.max_lag_s;
  options.cross_validate = !args.no_cross_validation;
  options.source = args.recording;
  std::string error;
  if (!options.IsValid(&error)) throw CLI::ValidationError("fit", error);
  return options;
}

int RunFit(const FitArgs& args) {
  core::FitOptions options = MakeFitOptions(args);
  io::ReadOptions read = MakeReadOptions(args.input);
  read.required = {"bx", "by", "bz"};
  for (const auto& a : options.terms.aux) read.required.push_back(a);
  if (!args.segments.empty()) {
    options.maneuvers = core::ReadSegmentsCsv(args.segments);
    options.maneuvers_given = true;
    options.maneuver_source = "segments file " + args.segments;
  }
  proto::SensorCalibration sensor;
  const bool has_sensor_file = !args.sensor.empty();
  if (has_sensor_file) {
    sensor = io::ReadSensorFile(args.sensor);
    if (!sensor.temperature_channel().empty()) {
      read.required.push_back(sensor.temperature_channel());
    }
  }
  const io::Table table = io::ReadRecording(args.recording, read);
  if (args.joint_sensor && !table.Has("f")) {
    std::cerr << "fluxtrim fit: " << args.recording
              << ": --joint-sensor needs a scalar sensor (channel f): its "
                 "absolute level pins the calibrated magnitude. Without one, "
                 "calibrate the fluxgate with `fluxtrim calibrate` (WMM2025 "
                 "reference) and fit with --sensor\n";
    return 1;
  }

  core::FitResult fit;
  core::JointFitResult joint;
  std::string sensor_source;
  if (args.joint_sensor) {
    core::JointFitOptions joint_options;
    joint_options.fit = options;
    joint = core::JointFit(table, joint_options);
    fit = joint.fit;
    if (!joint.usable) {
      fit.usable = false;
      fit.message = joint.message;
    }
    sensor = joint.calibration;
    sensor_source = "joint";
  } else if (has_sensor_file) {
    try {
      fit = core::FitWithSensor(table, sensor, options);
    } catch (const std::invalid_argument& e) {
      throw io::InputError(args.recording, "channels", e.what());
    }
    sensor_source = "file";
  } else {
    fit = core::FitModel(table, options);
  }

  if (!args.summary_json.empty()) {
    const auto summary = core::SummaryFromFit(
        fit, args.recording, fit.usable ? args.model : "", FLUXTRIM_VERSION);
    if (sensor_source.empty() || (args.joint_sensor && !joint.usable &&
                                  joint.calibration.schema_version() == 0)) {
      WriteJson(args.summary_json, summary);
    } else {
      WriteText(args.summary_json,
                SummaryJsonWithSensor(ToJson(summary), sensor, sensor_source));
    }
  }
  if (!fit.usable) {
    std::cerr << "fluxtrim fit: " << args.recording
              << ": cannot fit a compensation model: " << fit.message << "\n";
    for (const auto& w : fit.warnings) std::cerr << "  - " << w << "\n";
    if (!table.Has("f") && fit.message.find("maneuvers") != std::string::npos) {
      std::cerr << "  (a drone or vehicle rotation flight calibrates the "
                   "fluxgate: `fluxtrim calibrate`; the compensation fit "
                   "needs maneuvers of its own or their times with "
                   "--segments)\n";
    }
    return 1;
  }
  core::FitProvenance provenance;
  provenance.file = args.recording;
  provenance.channel_map = read.rename;
  provenance.tool_version = FLUXTRIM_VERSION;
  proto::CompensationModel model = core::ModelFromFit(fit, provenance);
  if (!sensor_source.empty()) core::AttachSensor(sensor, &model);
  io::WriteModelFile(args.model, model);
  if (args.joint_sensor && !args.sensor_output.empty()) {
    io::WriteSensorFile(args.sensor_output, sensor);
  }
  // The summary goes to stdout unless the JSON does.
  std::ostream& text = args.summary_json == "-" ? std::cerr : std::cout;
  text << core::FormatFitSummary(fit, args.recording);
  if (args.joint_sensor) {
    text << core::FormatJointSensorSummary(joint);
  } else if (has_sensor_file) {
    text << "  fluxgate calibrated with " << args.sensor << " ("
         << (sensor.mode().empty() ? "calibration" : sensor.mode())
         << ", reference " << sensor.reference() << ")\n";
  }
  text << "  model written to " << args.model
       << (sensor_source.empty() ? "" : " (with the sensor calibration)")
       << "\n";
  if (args.joint_sensor && !args.sensor_output.empty()) {
    text << "  sensor calibration written to " << args.sensor_output << "\n";
  }
  if (!args.report.empty()) {
    const io::Table calibrated =
        sensor_source.empty() ? io::Table() : core::CalibratedTable(table, sensor);
    core::WriteReport(args.report,
                      core::FitReportData(fit, sensor_source.empty() ? table : calibrated,
                                          args.recording, args.model));
    text << "  report written to " << args.report << "\n";
  }
  return 0;
}

}  // namespace

void AddFitCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<FitArgs>();
  CLI::App* sub = app.add_subcommand(
      "fit",
      "Fit a Tolles-Lawson compensation model to a compensation flight and "
      "report the figure of merit");
  sub->footer(
      "Model: H = sum a_i c_i + Bt sum b_ij c_i c_j + Bt sum e_ij c_i c'_j "
      "(+ aux terms), c = B/|B| in the body frame, Bt the total field. "
      "Induced and eddy columns are multiplied by Bt: perm_* in nT, ind_* "
      "dimensionless, eddy_* in seconds. The field (f, or |B| without a "
      "scalar sensor) and every term are band-passed alike before the "
      "least-squares fit (Ceres). Exit 1 when the recording cannot support "
      "a fit (the message says what to fly or fix).");
  sub->add_option("REC", args->recording,
                  "Compensation flight (.csv, .dfn/.dat ASEG-GDF2, .ftrec)")
      ->required();
  sub->add_option("-o,--output", args->model, "Model file to write")->required();
  sub->add_option("--terms", args->terms,
                  "Term set: default (16), full (18, trace of the induced and "
                  "eddy matrices fixed at 0), or groups such as "
                  "permanent,induced")
      ->capture_default_str();
  sub->add_option("--aux", args->aux,
                  "Extra channels as regressors c_i * channel "
                  "(comma list, e.g. i_motor,i_servo)");
  sub->add_option("--ridge", args->ridge,
                  "Ridge weight per sample in equilibrated units (>= 0), or "
                  "auto: generalised cross-validation")
      ->capture_default_str();
  sub->add_option("--loss", args->loss,
                  "Robust loss against spikes: none, huber or cauchy (scale "
                  "from the median absolute deviation)")
      ->capture_default_str();
  sub->add_option("--segments", args->segments,
                  "Maneuver times from a CSV (start_s,end_s,heading_deg,kind) "
                  "instead of detecting them");
  sub->add_option("--band", args->band, "Band-pass edges LOW,HIGH (Hz)")
      ->capture_default_str();
  sub->add_option("--order", args->order, "Butterworth order (band-pass has "
                                          "2*order poles)")
      ->capture_default_str();
  sub->add_option("--derivative-half-width", args->half_width,
                  "Half-width k (samples) of the centred derivative of the "
                  "direction cosines; default round(0.2 s * rate), >= 1");
  sub->add_flag("--no-lag", args->no_lag,
                "Do not estimate the lag of the scalar sensor");
  sub->add_option("--max-lag", args->max_lag_s,
                  "Largest lag searched (s; positive lag: the scalar sensor "
                  "reads late)")
      ->capture_default_str();
  sub->add_flag("--no-cross-validation", args->no_cross_validation,
                "Skip the leave-one-heading-out cross-validation");
  sub->add_option("--report", args->report,
                  "Write a self-contained HTML report (PATH.html)");
  sub->add_option("--summary-json", args->summary_json,
                  "Write the summary as JSON to PATH ('-' for stdout)");
  auto* sensor = sub->add_option(
      "--sensor", args->sensor,
      "Fluxgate calibration written by `fluxtrim calibrate`: the direction "
      "cosines (and |B| without a scalar sensor) come from calibrated "
      "vectors, and the model stores the calibration so that apply "
      "calibrates too");
  auto* joint = sub->add_flag(
      "--joint-sensor", args->joint_sensor,
      "Estimate the fluxgate's gains, offsets and non-orthogonality together "
      "with the Tolles-Lawson coefficients in one Ceres problem (needs a "
      "scalar sensor f; exit 1 without); the model stores the estimate");
  sub->add_option("--sensor-output", args->sensor_output,
                  "With --joint-sensor: also write the joint calibration as "
                  "a sensor file")
      ->needs(joint);
  sensor->excludes(joint);
  AddInputOptions(sub, &args->input);
  sub->callback([args, exit_code] { *exit_code = RunFit(*args); });
}

}  // namespace fluxtrim::cli
