#include "io/model_file.h"

#include <cmath>
#include <set>
#include <stdexcept>

#include <google/protobuf/text_format.h>

#include "io/error.h"
#include "io/text_proto_file.h"

namespace fluxtrim::io {
namespace {

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
  proto::CompensationModel model =
      ParseVersionedText<proto::CompensationModel>(text, source_name,
                                                   kModelSchemaVersion, "model");
  CheckContent(model, source_name);
  return model;
}

proto::CompensationModel ReadModelFile(const std::string& path) {
  return ParseModelText(ReadTextFile(path, "model"), path);
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
  WriteTextFileAtomically(path, FormatModelText(model), "model");
}

}  // namespace fluxtrim::io
