#include "src/runtime/text_model.h"

#include <cctype>
#include <cmath>
#include <cstdlib>
#include <stdexcept>

#include "models/tolles_lawson.h"

namespace fluxtrim::runtime {
namespace {

constexpr double kDegToRad = 3.14159265358979323846 / 180.0;
constexpr unsigned kSchemaVersion = 1;

class Tokenizer {
 public:
  Tokenizer(const std::string& text, const std::string& source)
      : text_(text), source_(source) {}

  [[noreturn]] void Fail(const std::string& what) const {
    throw std::runtime_error(source_ + ":" + std::to_string(line_) + ":" +
                             std::to_string(column_) + ": expected " + what);
  }

  void SkipSpace() {
    while (pos_ < text_.size()) {
      const char c = text_[pos_];
      if (c == '#') {
        while (pos_ < text_.size() && text_[pos_] != '\n') Advance();
      } else if (std::isspace(static_cast<unsigned char>(c))) {
        Advance();
      } else {
        break;
      }
    }
  }
  bool AtEnd() {
    SkipSpace();
    return pos_ >= text_.size();
  }
  char Peek() {
    SkipSpace();
    return pos_ < text_.size() ? text_[pos_] : '\0';
  }
  bool Consume(char c) {
    if (Peek() != c) return false;
    Advance();
    return true;
  }
  std::string Identifier() {
    SkipSpace();
    std::string id;
    while (pos_ < text_.size() &&
           (std::isalnum(static_cast<unsigned char>(text_[pos_])) ||
            text_[pos_] == '_')) {
      id += text_[pos_];
      Advance();
    }
    if (id.empty()) Fail("a field name");
    return id;
  }
  // A scalar: quoted string (adjacent strings concatenate) or a bare token.
  std::string Scalar() {
    SkipSpace();
    if (pos_ < text_.size() && (text_[pos_] == '"' || text_[pos_] == '\'')) {
      std::string s;
      while (pos_ < text_.size() && (text_[pos_] == '"' || text_[pos_] == '\'')) {
        s += QuotedString();
        SkipSpace();
      }
      return s;
    }
    std::string v;
    while (pos_ < text_.size()) {
      const char c = text_[pos_];
      if (std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '+' ||
          c == '.' || c == '_') {
        v += c;
        Advance();
      } else {
        break;
      }
    }
    if (v.empty()) Fail("a value");
    return v;
  }
  int line() const { return line_; }

 private:
  void Advance() {
    if (text_[pos_] == '\n') {
      ++line_;
      column_ = 1;
    } else {
      ++column_;
    }
    ++pos_;
  }
  std::string QuotedString() {
    const char quote = text_[pos_];
    Advance();
    std::string s;
    while (true) {
      if (pos_ >= text_.size() || text_[pos_] == '\n') Fail("a closing quote");
      char c = text_[pos_];
      Advance();
      if (c == quote) break;
      if (c == '\\') {
        if (pos_ >= text_.size()) Fail("an escape");
        c = text_[pos_];
        Advance();
        switch (c) {
          case 'n': s += '\n'; break;
          case 't': s += '\t'; break;
          case 'r': s += '\r'; break;
          default:
            if (c >= '0' && c <= '7') {
              int v = c - '0';
              for (int i = 0; i < 2 && pos_ < text_.size() &&
                              text_[pos_] >= '0' && text_[pos_] <= '7'; ++i) {
                v = v * 8 + (text_[pos_] - '0');
                Advance();
              }
              s += static_cast<char>(v);
            } else {
              s += c;
            }
        }
      } else {
        s += c;
      }
    }
    return s;
  }

  const std::string& text_;
  const std::string& source_;
  std::size_t pos_ = 0;
  int line_ = 1, column_ = 1;
};

void ParseFields(Tokenizer& tok, TextField* message, char close, int depth) {
  if (depth > 32) tok.Fail("messages nested at most 32 deep");
  while (true) {
    if (close == '\0' ? tok.AtEnd() : tok.Peek() == close) {
      if (close != '\0') tok.Consume(close);
      return;
    }
    if (close != '\0' && tok.AtEnd()) tok.Fail(std::string("'") + close + "'");
    TextField field;
    field.line = tok.line();
    field.name = tok.Identifier();
    const bool colon = tok.Consume(':');
    if (tok.Peek() == '{' || tok.Peek() == '<') {
      const char open = tok.Peek();
      tok.Consume(open);
      field.is_message = true;
      ParseFields(tok, &field, open == '{' ? '}' : '>', depth + 1);
    } else {
      if (!colon) tok.Fail("':' after '" + field.name + "'");
      field.value = tok.Scalar();
    }
    tok.Consume(';') || tok.Consume(',');
    message->children.push_back(std::move(field));
  }
}

double Number(const TextField* f, const std::string& source, double fallback) {
  if (!f) return fallback;
  const std::string& v = f->value;
  if (v == "inf" || v == "infinity") return HUGE_VAL;
  if (v == "-inf" || v == "-infinity") return -HUGE_VAL;
  char* end = nullptr;
  const double x = std::strtod(v.c_str(), &end);
  if (v.empty() || *end != '\0') {
    throw std::runtime_error(source + ":" + std::to_string(f->line) +
                             ": expected a number for " + f->name + ", found '" +
                             v + "'");
  }
  return x;
}

void Vector3(const TextField* v, const std::string& source, double scale,
             double fallback, double out[3]) {
  const char* axes[3] = {"x", "y", "z"};
  for (int i = 0; i < 3; ++i) {
    out[i] = scale * Number(v ? v->Find(axes[i]) : nullptr, source, fallback);
  }
}

}  // namespace

const TextField* TextField::Find(const std::string& child) const {
  for (const TextField& c : children) {
    if (c.name == child) return &c;
  }
  return nullptr;
}

std::vector<const TextField*> TextField::FindAll(const std::string& child) const {
  std::vector<const TextField*> all;
  for (const TextField& c : children) {
    if (c.name == child) all.push_back(&c);
  }
  return all;
}

TextField ParseTextFormat(const std::string& text, const std::string& source) {
  Tokenizer tok(text, source);
  TextField root;
  root.is_message = true;
  ParseFields(tok, &root, '\0', 0);
  return root;
}

models::CompensatorModel CompensatorModelFromText(
    const std::string& text, const std::string& source,
    std::vector<std::string>* aux_names) {
  const TextField root = ParseTextFormat(text, source);
  auto fail = [&source](const std::string& what) {
    throw std::runtime_error(source + ": " + what);
  };
  const double version = Number(root.Find("schema_version"), source, 0);
  if (version != kSchemaVersion) {
    fail("model schema_version " + std::to_string(static_cast<long>(version)) +
         " is not the supported version 1");
  }
  models::CompensatorModel m;
  const TextField* terms = root.Find("terms");
  if (!terms || !terms->Find("set")) fail("expected terms { set: ... }");
  try {
    m.engine.terms = models::ParseTermSet(terms->Find("set")->value);
  } catch (const std::invalid_argument& e) {
    fail(e.what());
  }
  for (const TextField* aux : terms->FindAll("aux")) {
    m.engine.terms.aux.push_back(aux->value);
  }
  if (aux_names) *aux_names = m.engine.terms.aux;
  m.engine.half_width =
      static_cast<int>(Number(root.Find("derivative_half_width"), source, 0));
  m.engine.sample_rate_hz = Number(root.Find("sample_rate_hz"), source, 0);
  const double gap = Number(root.Find("gap_factor"), source, 0);
  if (gap > 0) m.engine.gap_factor = gap;
  m.lag_s = Number(root.Find("lag_s"), source, 0);
  m.interference_mean_nT = Number(root.Find("interference_mean_nT"), source, 0);
  const std::vector<std::string> names = models::TermNames(m.engine.terms);
  const auto coefficients = root.FindAll("coefficients");
  if (coefficients.size() != names.size()) {
    fail("expected " + std::to_string(names.size()) + " coefficients, found " +
         std::to_string(coefficients.size()));
  }
  for (std::size_t i = 0; i < names.size(); ++i) {
    const TextField* name = coefficients[i]->Find("name");
    if (!name || name->value != names[i]) {
      fail("expected coefficient '" + names[i] + "' at position " +
           std::to_string(i + 1));
    }
    const double v = Number(coefficients[i]->Find("value"), source, 0);
    if (!std::isfinite(v)) fail("coefficient " + names[i] + " is not finite");
    m.coefficients.push_back(v);
  }
  const TextField* inputs = root.Find("inputs");
  const TextField* source_field = inputs ? inputs->Find("field_source") : nullptr;
  m.scalar_sensor = !(source_field && source_field->value == "|B|");
  const TextField* attitude = root.Find("attitude");
  if (attitude && attitude->Find("present") &&
      attitude->Find("present")->value == "true") {
    m.has_attitude_range = true;
    m.roll_min_deg = Number(attitude->Find("roll_min_deg"), source, 0);
    m.roll_max_deg = Number(attitude->Find("roll_max_deg"), source, 0);
    m.pitch_min_deg = Number(attitude->Find("pitch_min_deg"), source, 0);
    m.pitch_max_deg = Number(attitude->Find("pitch_max_deg"), source, 0);
  }
  if (const TextField* s = root.Find("sensor")) {
    m.has_sensor = true;
    Vector3(s->Find("gains"), source, 1.0, 1.0, m.sensor.gains);
    Vector3(s->Find("offsets_nT"), source, 1.0, 0.0, m.sensor.offsets_nT);
    Vector3(s->Find("nonorthogonality_deg"), source, kDegToRad, 0.0,
            m.sensor.nonorthogonality_rad);
    const TextField* has_mis = s->Find("has_misalignment");
    if (has_mis && has_mis->value == "true") {
      Vector3(s->Find("misalignment_deg"), source, kDegToRad, 0.0,
              m.sensor.misalignment_rad);
    }
    Vector3(s->Find("gain_tc_per_K"), source, 1.0, 0.0, m.sensor.gain_tc_per_K);
    Vector3(s->Find("offset_tc_nT_per_K"), source, 1.0, 0.0,
            m.sensor.offset_tc_nT_per_K);
    m.sensor.reference_temp_c = Number(s->Find("reference_temp_c"), source, 0);
  }
  return m;
}

}  // namespace fluxtrim::runtime
