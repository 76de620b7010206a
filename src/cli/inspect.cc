// fluxtrim inspect REC: what a recording holds before anything is fitted.
#include "src/core/inspect.h"

#include <iostream>
#include <sstream>
#include <stdexcept>

#include "models/wmm.h"
#include "src/cli/commands.h"
#include "src/cli/common.h"

namespace fluxtrim::cli {
namespace {

struct InspectArgs {
  std::string recording;
  std::string json_path;
  std::string date;
  std::string terms = "default";
  std::string aux;
  std::string band;
  InputArgs input;
};

int RunInspect(const InspectArgs& args) {
  io::ReadOptions read = MakeReadOptions(args.input);
  read.time_order = io::TimeOrderPolicy::kAccept;
  const io::Table table = io::ReadRecording(args.recording, read);
  core::InspectOptions options;
  if (!args.date.empty()) {
    try {
      options.decimal_year = models::ParseDecimalYear(args.date);
    } catch (const std::invalid_argument& e) {
      throw CLI::ValidationError("--date", e.what());
    }
  }
  try {
    options.excitation.terms = models::ParseTermSet(args.terms);
  } catch (const std::invalid_argument& e) {
    throw CLI::ValidationError("--terms", e.what());
  }
  options.excitation.terms.aux = SplitComma(args.aux);
  for (const std::string& name : options.excitation.terms.aux) {
    if (!table.Has(name)) {
      throw CLI::ValidationError(
          "--aux", "no channel '" + name + "' in " + args.recording);
    }
  }
  if (!args.band.empty()) {
    const std::vector<std::string> edges = SplitComma(args.band);
    if (edges.size() != 2) {
      throw CLI::ValidationError("--band", "expected LOW,HIGH in Hz");
    }
    options.excitation.band.low_hz = ParseNumber("--band", edges[0]);
    options.excitation.band.high_hz = ParseNumber("--band", edges[1]);
    std::string error;
    if (!options.excitation.band.IsValid(&error)) {
      throw CLI::ValidationError("--band", error);
    }
  }
  const proto::InspectSummary summary =
      core::Inspect(table, args.recording, options);
  std::cout << core::FormatInspectSummary(summary);
  if (!args.json_path.empty()) WriteJson(args.json_path, summary);
  return 0;
}

}  // namespace

void AddInspectCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<InspectArgs>();
  CLI::App* sub = app.add_subcommand(
      "inspect",
      "Report rate, gaps, channels, field sanity, maneuvers and excitation "
      "of a recording");
  sub->add_option("REC", args->recording,
                  "Recording (.csv, .dfn/.dat ASEG-GDF2, .ftrec)")
      ->required();
  sub->add_option("--json", args->json_path,
                  "Also write the report as JSON to PATH ('-' for stdout)");
  sub->add_option("--date", args->date,
                  "Date of the flight (YYYY-MM-DD or decimal year): compares "
                  "the field with WMM2025 at the recording's position");
  sub->add_option("--terms", args->terms,
                  "Term set of the excitation check: default (16), full "
                  "(18), or groups such as permanent,induced")
      ->capture_default_str();
  sub->add_option("--aux", args->aux,
                  "Extra channels as regressors c_i * channel in the "
                  "excitation check (comma list)");
  sub->add_option("--band", args->band,
                  "Band-pass edges LOW,HIGH (Hz) of the excitation check "
                  "(default 0.1,0.9, as fit)");
  AddInputOptions(sub, &args->input);
  sub->callback([args, exit_code] { *exit_code = RunInspect(*args); });
}

}  // namespace fluxtrim::cli
