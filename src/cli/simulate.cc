// fluxtrim simulate: not built yet.
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddSimulateCommand(CLI::App& app, int* exit_code) {
  AddPendingCommand(app, "simulate", "Simulate a flight from a scenario file", exit_code);
}

}  // namespace fluxtrim::cli
