// fluxtrim inspect: not built yet.
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddInspectCommand(CLI::App& app, int* exit_code) {
  AddPendingCommand(app, "inspect", "Report rate, gaps, channels, field sanity, maneuvers and excitation of a recording", exit_code);
}

}  // namespace fluxtrim::cli
