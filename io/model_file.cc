#include "io/model_file.h"

#include <cmath>
#include <cstdio>
#include <fstream>
#include <set>
#include <sstream>
#include <stdexcept>

#include <google/protobuf/io/tokenizer.h>
#include <google/protobuf/text_format.h>

#include "io/error.h"

namespace fluxtrim::io {
namespace {

// Collects the first parse error with its (1-based) place.
class FirstError : public google::protobuf::io::ErrorCollector {
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

constexpr char kHeader[] =
    "# fluxtrim compensation model (protobuf text format, schema in\n"
    "# io/proto/model.proto).\n"
    "# Tolles-Lawson interference on the total field (Tolles & Lawson 1950;\n"
    "# Leliak 1961), c = B/|B| in the body frame (x forward, y starboard,\n"
    "# z down), c' = dc/dt (1/s), Bt = total field (nT):\n"
    "#   H = sum a_i c_i + Bt sum b_ij c_i c_j + Bt sum e_ij c_i c'_j\n"
    "#       + sum g_ki c_i aux_k\n"
    "# Induced and eddy columns are multiplied by Bt: perm_* in nT, ind_*\n"
    "# dimensionless, eddy_* in s, aux_* in nT per channel unit.\n"
    "# lag_s > 0: the scalar sensor reads late; apply uses f(t + lag_s).\n"
    "# f_comp = f(t + lag_s) - (H - interference_mean_nT).\n";

void CheckContent(const proto::CompensationModel& m,
                  const std::string& source) {
  auto fail = [&source](const std::string& field, const std::string& what) {
    throw InputError(source, "field " + field, what);
  };
  if (!(m.sample_rate_hz() > 0) || !std::isfinite(m.sample_rate_hz())) {
    fail("sample_rate_hz", "expected a positive sample rate (Hz)");
  }
  if (m.derivative_half_width() < 1) {
    fail("derivative_half_width", "expected an integer >= 1 (samples)");
  }
  const auto& f = m.filter();
  if (f.order() < 1 || !(f.low_hz() > 0) || !(f.high_hz() > f.low_hz()) ||
      !std::isfinite(f.high_hz())) {
    fail("filter", "expected order >= 1 and 0 < low_hz < high_hz");
  }
  if (m.terms().names_size() == 0) {
    fail("terms.names", "expected at least one term name");
  }
  if (m.coefficients_size() != m.terms().names_size()) {
    fail("coefficients", "expected one coefficient per term name (" +
                             std::to_string(m.terms().names_size()) +
                             "), found " +
                             std::to_string(m.coefficients_size()));
  }
  std::set<std::string> seen;
  for (int i = 0; i < m.coefficients_size(); ++i) {
    const auto& c = m.coefficients(i);
    if (c.name() != m.terms().names(i)) {
      fail("coefficients[" + std::to_string(i) + "].name",
           "expected '" + m.terms().names(i) + "' (term order), found '" +
               c.name() + "'");
    }
    if (!seen.insert(c.name()).second) {
      fail("coefficients[" + std::to_string(i) + "].name",
           "duplicate term '" + c.name() + "'");
    }
    if (!std::isfinite(c.value())) {
      fail("coefficients[" + std::to_string(i) + "].value",
           "expected a finite number for " + c.name());
    }
  }
  if (!std::isfinite(m.lag_s()) || !std::isfinite(m.interference_mean_nt())) {
    fail("lag_s/interference_mean_nT", "expected finite numbers");
  }
  if (!(m.gap_factor() >= 1.0) && m.gap_factor() != 0.0) {
    fail("gap_factor", "expected a value >= 1 (or absent)");
  }
}

}  // namespace

proto::CompensationModel ParseModelText(const std::string& text,
                                        const std::string& source_name) {
  // First pass tolerates unknown fields so that a file from a newer schema
  // is refused by its version rather than by a field name.
  {
    proto::CompensationModel probe;
    google::protobuf::TextFormat::Parser lenient;
    lenient.AllowUnknownField(true);
    FirstError errors;
    lenient.RecordErrorsTo(&errors);
    if (lenient.ParseFromString(text, &probe) &&
        probe.schema_version() != kModelSchemaVersion) {
      throw InputError(
          source_name, "field schema_version",
          probe.schema_version() == 0
              ? "missing: expected schema_version: " +
                    std::to_string(kModelSchemaVersion) +
                    " (is this a fluxtrim model file?)"
              : "version " + std::to_string(probe.schema_version()) +
                    " is not supported by this fluxtrim (reads version " +
                    std::to_string(kModelSchemaVersion) + ")");
    }
  }
  proto::CompensationModel model;
  google::protobuf::TextFormat::Parser parser;
  FirstError errors;
  parser.RecordErrorsTo(&errors);
  if (!parser.ParseFromString(text, &model)) {
    if (errors.found()) {
      throw InputError(source_name, errors.line(), errors.column(),
                       errors.message() + " (expected a fluxtrim model, "
                                          "protobuf text format)");
    }
    throw InputError(source_name, 0, 0, "cannot parse the model file");
  }
  if (model.schema_version() != kModelSchemaVersion) {
    throw InputError(source_name, "field schema_version",
                     "expected schema_version: " +
                         std::to_string(kModelSchemaVersion));
  }
  CheckContent(model, source_name);
  return model;
}

proto::CompensationModel ReadModelFile(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError(path, 0, 0, "cannot open the model file");
  std::ostringstream text;
  text << in.rdbuf();
  return ParseModelText(text.str(), path);
}

std::string FormatModelText(const proto::CompensationModel& model) {
  google::protobuf::TextFormat::Printer printer;
  std::string body;
  if (!printer.PrintToString(model, &body)) {
    throw std::runtime_error("cannot format the model");
  }
  return std::string(kHeader) + body;
}

void WriteModelFile(const std::string& path,
                    const proto::CompensationModel& model) {
  const std::string text = FormatModelText(model);
  const std::string temp = path + ".tmp";
  {
    std::ofstream out(temp, std::ios::binary | std::ios::trunc);
    out << text;
    out.close();
    if (!out) {
      std::remove(temp.c_str());
      throw std::runtime_error(path + ": cannot write the model file");
    }
  }
  if (std::rename(temp.c_str(), path.c_str()) != 0) {
    std::remove(temp.c_str());
    throw std::runtime_error(path + ": cannot write the model file");
  }
}

}  // namespace fluxtrim::io
