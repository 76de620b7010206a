#pragma once
// Reads a compensation model file (protobuf text format of
// fluxtrim.proto.CompensationModel, io/proto/model.proto) without protobuf:
// a small tokenizer for the text format and the fields the compensation
// engine needs. The runtime is embedded where protobuf is not.

#include <string>
#include <vector>

#include "models/compensator.h"

namespace fluxtrim::runtime {

// One field of a text-format message: a scalar (value) or a message
// (children).
struct TextField {
  std::string name;
  std::string value;   // scalar text, unquoted for strings
  bool is_message = false;
  std::vector<TextField> children;
  int line = 0;

  const TextField* Find(const std::string& child) const;
  std::vector<const TextField*> FindAll(const std::string& child) const;
};

// Parses text-format text into a root message. Throws std::runtime_error
// "source:line:column: expected ..." on a syntax error.
TextField ParseTextFormat(const std::string& text, const std::string& source);

// Builds the engine model. Throws std::runtime_error naming the source and
// the field when a needed field is missing or the schema version is not 1.
models::CompensatorModel CompensatorModelFromText(const std::string& text,
                                                  const std::string& source,
                                                  std::vector<std::string>* aux_names);

}  // namespace fluxtrim::runtime
