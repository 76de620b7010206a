// fluxtrim apply MODEL REC -o OUT: compensates a recording with a fitted
// model, chunk by chunk in bounded memory.
#include <chrono>
#include <cstdio>
#include <iostream>

#include "io/model_file.h"
#include "src/cli/commands.h"
#include "src/cli/common.h"
#include "src/core/apply.h"
#include "src/core/apply_report.h"
#include "src/core/apply_summary.h"
#include "src/core/cautions.h"

namespace fluxtrim::cli {
namespace {

struct ApplyArgs {
  std::string model;
  std::string recording;
  std::string output;
  std::string summary_json;
  std::string report;
  std::size_t chunk_rows = 1u << 16;
  InputArgs input;
};

// One line on stderr, rewritten in place: samples done and throughput.
class Progress {
 public:
  explicit Progress(bool enabled) : enabled_(enabled), start_(Clock::now()) {}
  void Update(std::size_t samples) {
    if (!enabled_) return;
    const double s =
        std::chrono::duration<double>(Clock::now() - start_).count();
    if (s - last_ < 0.2) return;
    last_ = s;
    std::fprintf(stderr, "\r  %12zu samples  %8.2f M samples/s  %6.1f s",
                 samples, samples / std::max(s, 1e-9) / 1e6, s);
    std::fflush(stderr);
    shown_ = true;
  }
  ~Progress() {
    if (shown_) std::fprintf(stderr, "\n");
  }

 private:
  using Clock = std::chrono::steady_clock;
  bool enabled_;
  Clock::time_point start_;
  double last_ = 0;
  bool shown_ = false;
};

int RunApply(const ApplyArgs& args) {
  const proto::CompensationModel model = io::ReadModelFile(args.model);
  io::ReadOptions read = MakeReadOptions(args.input);
  read.required = core::RequiredChannels(model);
  auto reader = io::OpenRecording(args.recording, read);
  auto writer = io::CreateRecordingWriter(
      args.output, core::OutputSchema(reader->channels()));
  core::ApplyOptions options;
  options.chunk_rows = args.chunk_rows;
  Progress progress(StderrIsTerminal() && args.output != "-");
  options.progress = [&progress](std::size_t n) { progress.Update(n); };
  const core::ApplyResult result =
      core::ApplyChunked(model, *reader, *writer, options);
  if (args.output != "-") {
    std::cout << "Compensated " << result.samples << " samples of "
              << args.recording << " -> " << args.output << " ("
              << result.flagged << " flagged; latency "
              << result.latency_samples << " samples)\n";
  }
  if (!args.summary_json.empty() || !args.report.empty()) {
    // The summary needs whole series (zero-phase band-pass, maneuvers,
    // reciprocal lines): it reads the compensated output back in memory.
    const io::Table out = io::ReadRecording(args.output);
    const core::ApplySummaryResult summary =
        core::SummariseApply(model, out, args.recording);
    std::cout << core::FormatApplySummary(summary);
    if (!args.summary_json.empty()) WriteJson(args.summary_json, summary.proto);
    if (!args.report.empty()) {
      core::WriteReport(args.report, core::ApplyReportData(model, args.model,
                                                           out, summary));
      std::cout << "Report: " << args.report << "\n";
    }
  }
  return 0;
}

}  // namespace

void AddApplyCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ApplyArgs>();
  CLI::App* sub = app.add_subcommand(
      "apply",
      "Compensate a recording with a fitted model. Writes every input "
      "channel plus f_comp (compensated total field, nT), f_interference "
      "(modelled interference minus the model's mean level over its "
      "compensation flight, nT: f_comp = f - f_interference keeps the "
      "survey's absolute level) and flags (1 gap edge, 2 derivative not yet "
      "valid, 4 attitude outside the fit's range, 8 bad sample, 16 lag "
      "interpolation at a segment end).");
  sub->add_option("MODEL", args->model, "Model file written by fit")->required();
  sub->add_option("REC", args->recording,
                  "Recording (.csv, .dfn/.dat, .ftrec; '-' for CSV on stdin)")
      ->required();
  sub->add_option("-o,--output", args->output,
                  "Output recording; the format follows the extension "
                  "('-' for CSV on stdout)")
      ->required();
  sub->add_option("--summary-json", args->summary_json,
                  "Write a JSON summary (band-passed RMS before/after, IR, "
                  "FOM table when the recording has maneuvers, heading "
                  "error of reciprocal lines)");
  sub->add_option("--report", args->report,
                  "Write a self-contained HTML report (PATH.html)");
  sub->add_option("--chunk-rows", args->chunk_rows,
                  "Samples per chunk (memory bound)")
      ->check(CLI::Range(std::size_t{1}, std::size_t{1} << 26))
      ->capture_default_str();
  AddInputOptions(sub, &args->input);
  sub->callback([args, exit_code] { *exit_code = RunApply(*args); });
}

}  // namespace fluxtrim::cli
