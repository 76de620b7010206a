// fluxtrim fit: not built yet.
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddFitCommand(CLI::App& app, int* exit_code) {
  AddPendingCommand(app, "fit", "Fit a Tolles-Lawson compensation model to a compensation flight", exit_code);
}

}  // namespace fluxtrim::cli
