#pragma once
// Options and helpers shared by several subcommands (no numerics).

#include <string>
#include <vector>

#include <CLI/CLI.hpp>
#include <google/protobuf/message.h>

#include "io/recording.h"

namespace fluxtrim::cli {

// --map name=COLUMN (repeatable) and --nonfinite reject|gap.
struct InputArgs {
  std::vector<std::string> maps;
  std::string nonfinite = "reject";
};
void AddInputOptions(CLI::App* command, InputArgs* args);
// Throws CLI::ValidationError (exit 2) on a malformed --map.
io::ReadOptions MakeReadOptions(const InputArgs& args);

// Writes a summary message as JSON (protobuf JSON mapping, proto field names
// kept, default values printed). "-" writes to stdout. Throws
// std::runtime_error naming the path on failure.
void WriteJson(const std::string& path,
               const google::protobuf::Message& message);
std::string ToJson(const google::protobuf::Message& message);

// True when stderr is a terminal (progress output goes there only then).
bool StderrIsTerminal();

// "a, b,c" -> {"a", "b", "c"} (blanks around names dropped, empty names
// skipped).
std::vector<std::string> SplitComma(const std::string& s);

// The whole text as a number, else a usage error naming the option.
double ParseNumber(const std::string& option, const std::string& text);

}  // namespace fluxtrim::cli
