// fluxtrim stream MODEL: real-time compensation, stdin -> stdout or TCP.
#include <unistd.h>

#include <atomic>
#include <csignal>
#include <iostream>

#include "io/model_file.h"
#include "src/cli/commands.h"
#include "src/cli/common.h"
#include "src/core/stream.h"

namespace fluxtrim::cli {
namespace {

std::atomic<bool> g_stop{false};
void OnSignal(int) { g_stop = true; }

struct StreamArgs {
  std::string model;
  std::string listen;
  std::string input = "auto";
  std::size_t max_frame_bytes = 1u << 20;
  std::size_t max_clients = 0;
  bool adapt = false;
  core::AdaptOptions adapt_options;
  InputArgs input_args;
};

int RunStream(const StreamArgs& args) {
  if (args.adapt) {
    std::string why;
    if (!args.adapt_options.IsValid(&why)) {
      throw CLI::ValidationError("--adapt", why);
    }
  }
  const proto::CompensationModel model = io::ReadModelFile(args.model);
  core::StreamOptions options;
  options.format = args.input == "csv"      ? core::StreamFormat::kCsv
                   : args.input == "frames" ? core::StreamFormat::kFrames
                                            : core::StreamFormat::kAuto;
  options.read = MakeReadOptions(args.input_args);
  options.read.max_frame_bytes = args.max_frame_bytes;
  if (args.adapt) {
    // Refuses a model that cannot be adapted (no residual sigma, no standard
    // errors) before any sample is read.
    core::Adapter check(model, args.adapt_options, args.model, {});
    options.adapt = true;
    options.adapt_options = args.adapt_options;
    options.adapt_log = &std::cerr;
    std::cerr << "stream: adapting the coefficients in flight (drift "
              << args.adapt_options.drift_sigma_per_min
              << " sigma/min, bound +-"
              << args.adapt_options.bound_sigma
              << " sigma); the output is no longer what apply gives\n";
  }
  std::signal(SIGPIPE, SIG_IGN);
  if (args.listen.empty()) {
    const std::size_t n =
        core::ServeStream(model, STDIN_FILENO, STDOUT_FILENO, "stdin", options);
    std::cerr << "stream: " << n << " samples compensated\n";
    return 0;
  }
  const auto colon = args.listen.rfind(':');
  if (colon == std::string::npos) {
    throw CLI::ValidationError("--listen", "expected HOST:PORT");
  }
  core::ListenOptions listen;
  listen.host = args.listen.substr(0, colon);
  if (listen.host.size() > 2 && listen.host.front() == '[') {
    listen.host = listen.host.substr(1, listen.host.size() - 2);
  }
  try {
    listen.port = std::stoi(args.listen.substr(colon + 1));
  } catch (const std::exception&) {
    throw CLI::ValidationError("--listen", "expected a port number after ':'");
  }
  listen.max_clients = args.max_clients;
  listen.on_listen = [](int port) {
    std::cerr << "stream: listening on port " << port << "\n";
  };
  std::signal(SIGINT, OnSignal);
  std::signal(SIGTERM, OnSignal);
  core::ListenAndServe(model, listen, options, &g_stop, std::cerr);
  return 0;
}

}  // namespace

void AddStreamCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<StreamArgs>();
  CLI::App* sub = app.add_subcommand(
      "stream",
      "Compensate sample by sample in real time: CSV lines (header first) or "
      "length-delimited protobuf frames from stdin (or each TCP client) to "
      "stdout (or back to the client), every input channel plus f_comp, "
      "f_interference and flags. Each sample leaves k samples after it "
      "enters (the model's derivative half-width); the output equals apply.");
  sub->add_option("MODEL", args->model, "Model file written by fit")->required();
  sub->add_option("--listen", args->listen,
                  "Serve TCP clients on HOST:PORT (e.g. 127.0.0.1:7700) "
                  "instead of stdin/stdout");
  sub->add_option("--input", args->input,
                  "Input format: csv, frames, or auto (detected from the "
                  "first bytes)")
      ->check(CLI::IsMember({"auto", "csv", "frames"}))
      ->capture_default_str();
  sub->add_option("--max-frame-bytes", args->max_frame_bytes,
                  "Largest protobuf frame accepted (bytes)")
      ->capture_default_str();
  sub->add_option("--max-clients", args->max_clients,
                  "With --listen: stop after serving this many clients "
                  "(0: until interrupted)")
      ->capture_default_str();
  CLI::Option* adapt = sub->add_flag(
      "--adapt", args->adapt,
      "Adapt the coefficients in flight: a Kalman filter tracks their change "
      "since the fit on the band-passed residual, each coefficient kept "
      "within --adapt-bound-sigma standard errors of its fitted value, the "
      "level of f_comp kept continuous, one log line per update on stderr. "
      "Do NOT use it over strong anomalies or cultural noise (the anomaly is "
      "fitted into the coefficients and real signal is removed), outside the "
      "fit's attitude range, or for data a client accepts only with the "
      "fitted, FOM-validated model. Apply after the flight does not "
      "reproduce an adapted stream.");
  sub->add_option("--adapt-drift", args->adapt_options.drift_sigma_per_min,
                  "Expected change of each coefficient in one minute, in its "
                  "standard errors (random walk; >= 0): larger follows a "
                  "change faster and fits more noise")
      ->needs(adapt)
      ->capture_default_str();
  sub->add_option("--adapt-bound-sigma", args->adapt_options.bound_sigma,
                  "Largest change of a coefficient from its fitted value, in "
                  "its standard errors (> 0)")
      ->needs(adapt)
      ->capture_default_str();
  sub->add_option("--adapt-interval", args->adapt_options.update_interval_s,
                  "Seconds between coefficient updates (> 0)")
      ->needs(adapt)
      ->capture_default_str();
  AddInputOptions(sub, &args->input_args);
  sub->callback([args, exit_code] { *exit_code = RunStream(*args); });
}

}  // namespace fluxtrim::cli
