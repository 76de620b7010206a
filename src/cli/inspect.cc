// fluxtrim inspect REC: what a recording holds before anything is fitted.
#include <iostream>

#include "models/wmm.h"
#include "src/cli/commands.h"
#include "src/cli/common.h"
#include "src/core/inspect.h"

namespace fluxtrim::cli {
namespace {

struct InspectArgs {
  std::string recording;
  std::string json_path;
  std::string date;
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
  AddInputOptions(sub, &args->input);
  sub->callback([args, exit_code] { *exit_code = RunInspect(*args); });
}

}  // namespace fluxtrim::cli
