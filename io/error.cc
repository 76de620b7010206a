#include "io/error.h"

namespace fluxtrim::io {
namespace {

std::string Where(const std::string& file, std::size_t line,
                  std::size_t column) {
  std::string where = file.empty() ? "<input>" : file;
  if (line > 0) where += ":" + std::to_string(line);
  if (column > 0) where += ":" + std::to_string(column);
  return where;
}

}  // namespace

InputError::InputError(const std::string& file, std::size_t line,
                       std::size_t column, const std::string& message)
    : std::runtime_error(Where(file, line, column) + ": " + message),
      file_(file),
      line_(line),
      column_(column) {}

InputError::InputError(const std::string& file, const std::string& place,
                       const std::string& message)
    : std::runtime_error((file.empty() ? std::string("<input>") : file) +
                         ": " + place + ": " + message),
      file_(file) {}

InputError::InputError(const std::string& message)
    : std::runtime_error(message) {}

}  // namespace fluxtrim::io
