#pragma once
// One file per subcommand; each registers itself on the root app. A
// command's callback stores its exit code in *exit_code: 0 ok, 1 the job
// failed (bad data, a fit that cannot be trusted), 2 usage error.
// No numerical code lives in src/cli/.

#include <CLI/CLI.hpp>

namespace fluxtrim::cli {

void AddInspectCommand(CLI::App& app, int* exit_code);
void AddFitCommand(CLI::App& app, int* exit_code);
void AddApplyCommand(CLI::App& app, int* exit_code);
void AddCalibrateCommand(CLI::App& app, int* exit_code);
void AddStreamCommand(CLI::App& app, int* exit_code);
void AddSimulateCommand(CLI::App& app, int* exit_code);
void AddFieldCommand(CLI::App& app, int* exit_code);

// Registers a subcommand that is not built yet: it prints
// "<name>: not yet implemented" and exits with 2.
void AddPendingCommand(CLI::App& app, const char* name, const char* summary,
                       int* exit_code);

}  // namespace fluxtrim::cli
