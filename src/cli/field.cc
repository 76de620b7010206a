// fluxtrim field: not built yet.
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddFieldCommand(CLI::App& app, int* exit_code) {
  AddPendingCommand(app, "field", "Print the WMM2025 main field at a place and date", exit_code);
}

}  // namespace fluxtrim::cli
