// fluxtrim stream: not built yet.
#include "src/cli/commands.h"

namespace fluxtrim::cli {

void AddStreamCommand(CLI::App& app, int* exit_code) {
  AddPendingCommand(app, "stream", "Compensate sample by sample in real time (stdin/stdout or TCP)", exit_code);
}

}  // namespace fluxtrim::cli
