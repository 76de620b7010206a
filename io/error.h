#pragma once
// The one exception type for bad input. Its message names the file, the
// place in it (line and column, or a GDF2 field), and what was expected.

#include <cstddef>
#include <stdexcept>
#include <string>

namespace fluxtrim::io {

class InputError : public std::runtime_error {
 public:
  // line and column are 1-based; 0 means "not applicable".
  InputError(const std::string& file, std::size_t line, std::size_t column,
             const std::string& message);
  // For places that are not line/column, e.g. a GDF2 field or a frame index:
  // "file: field MAG: ...".
  InputError(const std::string& file, const std::string& place,
             const std::string& message);
  explicit InputError(const std::string& message);

  const std::string& file() const { return file_; }
  std::size_t line() const { return line_; }
  std::size_t column() const { return column_; }

 private:
  std::string file_;
  std::size_t line_ = 0;
  std::size_t column_ = 0;
};

}  // namespace fluxtrim::io
