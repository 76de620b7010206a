#pragma once
// Tiny scanners over the SVG/HTML text the report writes, for tests.
// (No std::regex: GCC 12's <regex> trips -Wmaybe-uninitialized under the
// sanitizer build with -Werror.)

#include <cctype>
#include <string>
#include <vector>

namespace fluxtrim::core::report_testing {

// Every start tag "<name ...>" (text from '<' to '>' inclusive).
inline std::vector<std::string> TagsOf(const std::string& doc,
                                       const std::string& name) {
  std::vector<std::string> tags;
  const std::string open = "<" + name;
  for (std::size_t p = doc.find(open); p != std::string::npos;
       p = doc.find(open, p + 1)) {
    const char next = p + open.size() < doc.size() ? doc[p + open.size()] : '>';
    if (next != ' ' && next != '>' && next != '/') continue;  // e.g. <pathX
    const std::size_t e = doc.find('>', p);
    if (e == std::string::npos) break;
    tags.push_back(doc.substr(p, e + 1 - p));
  }
  return tags;
}

// Value of attribute `name` in one tag ("" when absent).
inline std::string Attr(const std::string& tag, const std::string& name) {
  const std::string key = " " + name + "=\"";
  const std::size_t p = tag.find(key);
  if (p == std::string::npos) return "";
  const std::size_t b = p + key.size();
  const std::size_t e = tag.find('"', b);
  return e == std::string::npos ? "" : tag.substr(b, e - b);
}

// Every attribute value (text inside ="...") of the document.
inline std::vector<std::string> AttributeValues(const std::string& doc) {
  std::vector<std::string> out;
  for (std::size_t p = doc.find("=\""); p != std::string::npos;
       p = doc.find("=\"", p + 2)) {
    const std::size_t e = doc.find('"', p + 2);
    if (e == std::string::npos) break;
    out.push_back(doc.substr(p + 2, e - p - 2));
    p = e - 1;
  }
  return out;
}

// Every run of character data between '>' and '<'.
inline std::vector<std::string> TextRuns(const std::string& doc) {
  std::vector<std::string> out;
  for (std::size_t p = doc.find('>'); p != std::string::npos;
       p = doc.find('>', p + 1)) {
    const std::size_t e = doc.find('<', p + 1);
    if (e == std::string::npos) break;
    if (e > p + 1) out.push_back(doc.substr(p + 1, e - p - 1));
  }
  return out;
}

// True when `text` holds "nan", "inf" or "infinity" as a word (any case):
// how printf and iostreams spell non-finite doubles.
inline bool HasNonFiniteWord(const std::string& text) {
  std::string word;
  for (std::size_t i = 0; i <= text.size(); ++i) {
    const unsigned char c = i < text.size() ? static_cast<unsigned char>(text[i]) : ' ';
    if (std::isalpha(c)) {
      word += static_cast<char>(std::tolower(c));
      continue;
    }
    if (word == "nan" || word == "inf" || word == "infinity") return true;
    word.clear();
  }
  return false;
}

}  // namespace fluxtrim::core::report_testing
