#pragma once
// Versioned protobuf text files (the model, the sensor calibration): read
// with the schema version checked first, errors with file, line and column;
// written whole or not at all (a temporary file, then rename).

#include <cstdio>
#include <fstream>
#include <sstream>
#include <stdexcept>
#include <string>

#include <google/protobuf/io/tokenizer.h>
#include <google/protobuf/text_format.h>

#include "io/error.h"

namespace fluxtrim::io {

// Collects the first parse error with its (1-based) place.
class FirstTextError : public google::protobuf::io::ErrorCollector {
 public:
  void AddError(int line, google::protobuf::io::ColumnNumber column,
                const std::string& message) override {
    if (found_) return;
    found_ = true;
    line_ = static_cast<std::size_t>(line + 1);
    column_ = static_cast<std::size_t>(column + 1);
    message_ = message;
  }
  bool found() const { return found_; }
  std::size_t line() const { return line_; }
  std::size_t column() const { return column_; }
  const std::string& message() const { return message_; }

 private:
  bool found_ = false;
  std::size_t line_ = 0, column_ = 0;
  std::string message_;
};

// Parses `text` as a Message of schema `version`; `what` names the kind of
// file in messages ("model", "sensor calibration"). A file from another
// schema version is refused by its version before any field name (a first,
// lenient pass that tolerates unknown fields). Content checks are the
// caller's.
template <typename Message>
Message ParseVersionedText(const std::string& text,
                           const std::string& source_name, int version,
                           const std::string& what) {
  {
    Message probe;
    google::protobuf::TextFormat::Parser lenient;
    lenient.AllowUnknownField(true);
    FirstTextError errors;
    lenient.RecordErrorsTo(&errors);
    if (lenient.ParseFromString(text, &probe) &&
        static_cast<int>(probe.schema_version()) != version) {
      throw InputError(
          source_name, "field schema_version",
          probe.schema_version() == 0
              ? "missing: expected schema_version: " + std::to_string(version) +
                    " (is this a fluxtrim " + what + " file?)"
              : "version " + std::to_string(probe.schema_version()) +
                    " is not supported by this fluxtrim (reads version " +
                    std::to_string(version) + ")");
    }
  }
  Message message;
  google::protobuf::TextFormat::Parser parser;
  FirstTextError errors;
  parser.RecordErrorsTo(&errors);
  if (!parser.ParseFromString(text, &message)) {
    if (errors.found()) {
      throw InputError(source_name, errors.line(), errors.column(),
                       errors.message() + " (expected a fluxtrim " + what +
                           ", protobuf text format)");
    }
    throw InputError(source_name, 0, 0, "cannot parse the " + what + " file");
  }
  if (static_cast<int>(message.schema_version()) != version) {
    throw InputError(source_name, "field schema_version",
                     "expected schema_version: " + std::to_string(version));
  }
  return message;
}

// The whole file as text; `what` as above.
inline std::string ReadTextFile(const std::string& path,
                                const std::string& what) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError(path, 0, 0, "cannot open the " + what + " file");
  std::ostringstream text;
  text << in.rdbuf();
  return text.str();
}

// Writes `text` to `path` through path + ".tmp" and a rename, so that a
// failed write leaves no partial file; throws std::runtime_error.
inline void WriteTextFileAtomically(const std::string& path,
                                    const std::string& text,
                                    const std::string& what) {
  const std::string temp = path + ".tmp";
  const std::string error = path + ": cannot write the " + what + " file";
  {
    std::ofstream out(temp, std::ios::binary | std::ios::trunc);
    out << text;
    out.close();
    if (!out) {
      std::remove(temp.c_str());
      throw std::runtime_error(error);
    }
  }
  if (std::rename(temp.c_str(), path.c_str()) != 0) {
    std::remove(temp.c_str());
    throw std::runtime_error(error);
  }
}

}  // namespace fluxtrim::io
