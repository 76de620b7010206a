#pragma once
// Running commands from tests: the fluxtrim binary under test
// (FLUXTRIM_EXE) and the reference interpreter (FLUXTRIM_PYTHON, Debian's
// /usr/bin/python3 with NumPy and SciPy), both set by tests/CMakeLists.txt.

#include <sys/wait.h>

#include <cstdio>
#include <cstdlib>
#include <string>

namespace fluxtrim::test_support {

struct CommandResult {
  int code = -1;       // exit status; -1 when it did not start or was killed
  std::string output;  // standard output (add 2>&1 to the command for both)
};

// Runs `command` with /bin/sh and collects its standard output.
inline CommandResult RunCommand(const std::string& command) {
  CommandResult run;
  FILE* pipe = popen(command.c_str(), "r");
  if (pipe == nullptr) return run;
  char buffer[4096];
  std::size_t n = 0;
  while ((n = std::fread(buffer, 1, sizeof buffer, pipe)) > 0) {
    run.output.append(buffer, n);
  }
  const int status = pclose(pipe);
  run.code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  return run;
}

#ifdef FLUXTRIM_EXE
// `fluxtrim ARGS` (arguments already shell-quoted where needed), standard
// output and standard error together.
inline CommandResult RunFluxtrimMerged(const std::string& args) {
  return RunCommand(std::string("'") + FLUXTRIM_EXE + "' " + args + " 2>&1");
}
#endif

#ifdef FLUXTRIM_PYTHON
// Whether the reference interpreter has SciPy (tests that compare with it
// skip, saying so, when it does not).
inline bool HaveScipy() {
  static const bool have = [] {
    const std::string cmd = std::string(FLUXTRIM_PYTHON) +
                            " -c 'import scipy.signal' >/dev/null 2>&1";
    return std::system(cmd.c_str()) == 0;
  }();
  return have;
}
#endif

}  // namespace fluxtrim::test_support
