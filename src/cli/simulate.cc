// fluxtrim simulate SCENARIO -o REC: a synthetic flight from a scenario
// file (io/proto/scenario.proto), written in the format of the extension.
#include <cstdint>
#include <fstream>
#include <iostream>
#include <memory>
#include <stdexcept>
#include <string>

#include "io/error.h"
#include "io/recording.h"
#include "src/cli/commands.h"
#include "src/core/cautions.h"
#include "src/core/scenario.h"

namespace fluxtrim::cli {
namespace {

struct SimulateArgs {
  std::string scenario;
  std::string output;
  std::string truth;
  std::string segments;
  std::uint64_t seed = 0;
  bool quiet = false;
};

int RunSimulate(const SimulateArgs& args, bool seed_given) {
  // Refuse an unknown extension before the work is done (a usage error).
  const auto check_format = [](const std::string& option,
                               const std::string& path) {
    if (path == "-") return;
    try {
      io::FormatFromPath(path);
    } catch (const io::InputError& e) {
      throw CLI::ValidationError(option, e.what());
    }
  };
  check_format("--output", args.output);
  if (!args.truth.empty()) check_format("--truth", args.truth);
  core::SimulateOptions options;
  options.override_seed = seed_given;
  options.seed = args.seed;
  const core::SimulatedFlight flight =
      core::SimulateScenarioFile(args.scenario, options);
  // The comment names the scenario by its file name only, so that the
  // output does not depend on the directory it was made from.
  const std::string base =
      args.scenario.substr(args.scenario.find_last_of('/') + 1);
  io::WriteOptions write;
  write.comment = "simulated by fluxtrim from " + base + " (" + flight.name +
                  ", seed " + std::to_string(flight.seed) + ")";
  io::WriteRecording(args.output, flight.recording, write);
  if (!args.truth.empty()) {
    io::WriteOptions truth_write;
    truth_write.comment = "truth of " + write.comment;
    io::WriteRecording(args.truth, flight.truth, truth_write);
  }
  if (!args.segments.empty()) {
    std::ofstream out(args.segments, std::ios::binary);
    out << core::FormatSegmentsCsv(flight);
    out.close();
    if (!out) {
      throw std::runtime_error(args.segments +
                               ": cannot write the segments file");
    }
  }
  for (const std::string& w : flight.warnings) {
    std::cerr << "warning: " << w << "\n";
  }
  if (!args.quiet) {
    std::ostream& out = args.output == "-" ? std::cerr : std::cout;
    out << core::FormatFlightSummary(flight, core::SummarizeFlight(flight));
    out << "wrote " << args.output;
    if (!args.truth.empty()) out << ", " << args.truth;
    if (!args.segments.empty()) out << ", " << args.segments;
    out << "\n" << core::kFlightCaution << "\n";
    if (flight.platform_kind == "ground_vehicle") {
      out << core::kOrdnanceCaution << "\n";
    }
  }
  return 0;
}

}  // namespace

void AddSimulateCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<SimulateArgs>();
  CLI::App* sub = app.add_subcommand(
      "simulate",
      "Simulate a flight from a scenario file (platform, sensors, place, "
      "date, maneuver plan)");
  sub->add_option("SCENARIO", args->scenario,
                  "Scenario file (protobuf text format, see "
                  "io/proto/scenario.proto)")
      ->required();
  sub->add_option("-o,--output", args->output,
                  "Recording to write: .csv, .dfn/.dat (ASEG-GDF2), .ftrec; "
                  "'-' for CSV on stdout")
      ->required();
  sub->add_option("--truth", args->truth,
                  "Also write the truth table (interference, noise, Earth "
                  "field, maneuvers) to PATH");
  sub->add_option("--segments", args->segments,
                  "Also write the pitch/roll/yaw maneuvers as CSV "
                  "(start_s,end_s,heading_deg,kind) for fit --segments");
  CLI::Option* seed = sub->add_option(
      "--seed", args->seed, "Replace the scenario's seed (noise, turbulence, "
                            "currents, faults)");
  sub->add_flag("-q,--quiet", args->quiet, "Print nothing on success");
  sub->callback([args, exit_code, seed] {
    *exit_code = RunSimulate(*args, seed->count() > 0);
  });
}

}  // namespace fluxtrim::cli
