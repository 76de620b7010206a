#include "src/cli/common.h"

#include <unistd.h>

#include <fstream>
#include <iostream>
#include <sstream>
#include <stdexcept>

#include <google/protobuf/util/json_util.h>

namespace fluxtrim::cli {

void AddInputOptions(CLI::App* command, InputArgs* args) {
  command->add_option("--map", args->maps,
                      "Read channel NAME from file column COLUMN "
                      "(NAME=COLUMN, repeatable; e.g. --map f=MAG_RAW)");
  command
      ->add_option("--nonfinite", args->nonfinite,
                   "NaN/Inf text where a number must be: reject (error) or "
                   "gap (missing sample)")
      ->check(CLI::IsMember({"reject", "gap"}))
      ->capture_default_str();
}

io::ReadOptions MakeReadOptions(const InputArgs& args) {
  io::ReadOptions options;
  for (const std::string& map : args.maps) {
    const auto eq = map.find('=');
    if (eq == std::string::npos || eq == 0 || eq + 1 == map.size()) {
      throw CLI::ValidationError("--map", "expected NAME=COLUMN, got '" +
                                              map + "'");
    }
    options.rename[map.substr(0, eq)] = map.substr(eq + 1);
  }
  options.non_finite = args.nonfinite == "gap" ? io::NonFinitePolicy::kGap
                                               : io::NonFinitePolicy::kReject;
  return options;
}

std::string ToJson(const google::protobuf::Message& message) {
  google::protobuf::util::JsonPrintOptions options;
  options.add_whitespace = true;
  options.always_print_primitive_fields = true;
  options.preserve_proto_field_names = true;
  std::string json;
  const auto status =
      google::protobuf::util::MessageToJsonString(message, &json, options);
  if (!status.ok()) {
    throw std::runtime_error("cannot write JSON: " + status.ToString());
  }
  return json;
}

void WriteJson(const std::string& path,
               const google::protobuf::Message& message) {
  const std::string json = ToJson(message);
  if (path == "-") {
    std::cout << json;
    return;
  }
  std::ofstream out(path, std::ios::binary);
  out << json;
  out.close();
  if (!out) throw std::runtime_error(path + ": cannot write the JSON file");
}

bool StderrIsTerminal() { return isatty(STDERR_FILENO) == 1; }

std::vector<std::string> SplitComma(const std::string& s) {
  std::vector<std::string> out;
  std::stringstream words(s);
  std::string word;
  while (std::getline(words, word, ',')) {
    const auto b = word.find_first_not_of(" \t");
    const auto e = word.find_last_not_of(" \t");
    if (b != std::string::npos) out.push_back(word.substr(b, e - b + 1));
  }
  return out;
}

double ParseNumber(const std::string& option, const std::string& text) {
  try {
    std::size_t used = 0;
    const double v = std::stod(text, &used);
    if (used != text.size()) throw std::invalid_argument(text);
    return v;
  } catch (const std::exception&) {
    throw CLI::ValidationError(option, "expected a number, got '" + text + "'");
  }
}

}  // namespace fluxtrim::cli
