// fluxtrim apply: not built yet.
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddApplyCommand(CLI::App& app, int* exit_code) {
  AddPendingCommand(app, "apply", "Compensate a recording with a fitted model", exit_code);
}

}  // namespace fluxtrim::cli
