// fluxtrim field LAT_DEG LON_DEG ALT_M DATE: the main field of the World
// Magnetic Model at a place and date (what a survey should see before
// crustal anomalies and the platform). Numerics live in models/wmm.*.
#include <charconv>
#include <cmath>
#include <cstdio>
#include <iostream>
#include <memory>
#include <optional>
#include <string>

#include "models/wmm.h"
#include "src/cli/commands.h"

namespace fluxtrim::cli {
namespace {

struct FieldArgs {
  double lat_deg = 0;
  double lon_deg = 0;
  double alt_m = 0;
  std::string date;
  bool json = false;
  std::string model_path;
};

// Validator: the text is a finite number in [lo, hi]; the message says what
// the argument is.
CLI::Validator NumberIn(double lo, double hi, const std::string& what) {
  return CLI::Validator(
      [lo, hi, what](std::string& text) -> std::string {
        double value = 0;
        const char* begin = text.data();
        const char* end = text.data() + text.size();
        if (begin != end && *begin == '+') ++begin;
        const auto result = std::from_chars(begin, end, value);
        if (text.empty() || result.ec != std::errc() || result.ptr != end ||
            !std::isfinite(value)) {
          return "'" + text + "' is not a number: expected " + what;
        }
        if (value < lo || value > hi) {
          return "'" + text + "' is out of range: expected " + what;
        }
        return std::string();
      },
      what);
}

CLI::Validator DateText() {
  return CLI::Validator(
      [](std::string& text) -> std::string {
        try {
          models::ParseDecimalYear(text);
        } catch (const std::invalid_argument& e) {
          return e.what();
        }
        return std::string();
      },
      "YYYY-MM-DD or decimal year");
}

std::string JsonString(const std::string& text) {
  std::string out = "\"";
  for (const char c : text) {
    if (c == '"' || c == '\\') {
      out += '\\';
      out += c;
    } else if (static_cast<unsigned char>(c) < 0x20) {
      char escaped[8];
      std::snprintf(escaped, sizeof escaped, "\\u%04x", c);
      out += escaped;
    } else {
      out += c;
    }
  }
  return out + "\"";
}

std::string Format(const char* format, double value) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, format, value);
  return buffer;
}

std::string Hemisphere(double value_deg, char positive, char negative) {
  return Format("%.6f", std::fabs(value_deg)) + " " +
         (value_deg < 0 ? negative : positive);
}

void PrintText(const models::MagneticModel& model, const FieldArgs& args,
               double decimal_year,
               const models::GeomagneticFieldWithRate& result) {
  const models::GeomagneticField& f = result.field;
  const models::GeomagneticField& d = result.per_year;
  std::cout << "Main field, " << model.name() << " (epoch "
            << Format("%.1f", model.epoch()) << ", released "
            << model.release_date() << ")\n"
            << "  place  " << Hemisphere(args.lat_deg, 'N', 'S') << "  "
            << Hemisphere(args.lon_deg, 'E', 'W') << ", "
            << Format("%.1f", args.alt_m) << " m above the WGS84 ellipsoid\n"
            << "  date   " << args.date << " (decimal year "
            << Format("%.4f", decimal_year) << ")\n\n"
            << "                         field      annual change\n";
  const auto row = [](const char* label, double value, double rate,
                      const char* unit, const char* value_format,
                      const char* rate_format) {
    char line[160];
    std::snprintf(line, sizeof line, "  %-14s", label);
    std::string out = line;
    std::snprintf(line, sizeof line, value_format, value);
    out += line;
    out += " ";
    out += unit;
    std::snprintf(line, sizeof line, rate_format, rate);
    out += line;
    out += " ";
    out += unit;
    while (out.back() == ' ') out.pop_back();
    out += "/yr\n";
    return out;
  };
  std::cout << row("X north", f.x_nT, d.x_nT, "nT ", "%12.1f", "%+12.1f")
            << row("Y east", f.y_nT, d.y_nT, "nT ", "%12.1f", "%+12.1f")
            << row("Z down", f.z_nT, d.z_nT, "nT ", "%12.1f", "%+12.1f")
            << row("H horizontal", f.h_nT, d.h_nT, "nT ", "%12.1f", "%+12.1f")
            << row("F total", f.f_nT, d.f_nT, "nT ", "%12.1f", "%+12.1f")
            << row("inclination", f.incl_deg, d.incl_deg, "deg", "%12.2f",
                   "%+12.3f")
            << row("declination", f.decl_deg, d.decl_deg, "deg", "%12.2f",
                   "%+12.3f");
  std::cout << "  (inclination positive down; declination "
            << Format("%.2f", std::fabs(f.decl_deg))
            << (f.decl_deg < 0 ? " deg west" : " deg east")
            << " of true north)\n";
  if (std::fabs(args.lat_deg) == 90.0) {
    std::cout << "  At the geographic pole \"north\" is taken along the "
                 "meridian of the longitude given; declination turns with "
                 "it.\n";
  }
  std::cout << "The model holds the core field only: crustal anomalies, "
               "diurnal variation and storms come on top.\n";
}

void PrintJson(const models::MagneticModel& model, double decimal_year,
               const models::GeomagneticField& f) {
  std::cout << "{\"model\": " << JsonString(model.name())
            << ", \"decimal_year\": " << Format("%.8f", decimal_year)
            << ", \"x_nT\": " << Format("%.6f", f.x_nT)
            << ", \"y_nT\": " << Format("%.6f", f.y_nT)
            << ", \"z_nT\": " << Format("%.6f", f.z_nT)
            << ", \"h_nT\": " << Format("%.6f", f.h_nT)
            << ", \"f_nT\": " << Format("%.6f", f.f_nT)
            << ", \"incl_deg\": " << Format("%.6f", f.incl_deg)
            << ", \"decl_deg\": " << Format("%.6f", f.decl_deg) << "}\n";
}

int RunField(const FieldArgs& args) {
  std::optional<models::MagneticModel> loaded;
  if (!args.model_path.empty()) {
    loaded = models::MagneticModel::FromCofFile(args.model_path);
  }
  const models::MagneticModel& model =
      loaded ? *loaded : models::MagneticModel::Wmm2025();
  const double decimal_year = models::ParseDecimalYear(args.date);

  if (!model.IsValidDate(decimal_year)) {
    std::cerr << "warning: date " << args.date << " ("
              << Format("%.4f", decimal_year) << ") is outside " << model.name()
              << "'s validity, " << Format("%.1f", model.epoch()) << " to "
              << Format("%.1f", model.epoch() + 5.0)
              << ": the field is extrapolated and less accurate\n";
  }
  if (args.alt_m < models::kWmmMinAlt_m || args.alt_m > models::kWmmMaxAlt_m) {
    std::cerr << "warning: altitude " << Format("%.0f", args.alt_m)
              << " m is outside the model's stated range, "
              << Format("%.0f", models::kWmmMinAlt_m) << " to "
              << Format("%.0f", models::kWmmMaxAlt_m) << " m\n";
  }
  models::GeomagneticFieldWithRate result;
  try {
    result = model.FieldWithRate(args.lat_deg, args.lon_deg, args.alt_m,
                                 decimal_year);
  } catch (const std::invalid_argument& e) {
    throw CLI::ValidationError("field", e.what());
  }
  switch (models::ClassifyCompassZone(result.field.h_nT)) {
    case models::CompassZone::kBlackout:
      std::cerr << "warning: horizontal field "
                << Format("%.0f", result.field.h_nT) << " nT < "
                << Format("%.0f", models::kWmmBlackoutH_nT)
                << " nT: declination is unreliable here (compass blackout "
                   "zone)\n";
      break;
    case models::CompassZone::kCaution:
      std::cerr << "warning: horizontal field "
                << Format("%.0f", result.field.h_nT) << " nT < "
                << Format("%.0f", models::kWmmCautionH_nT)
                << " nT: declination errors grow here (compass caution "
                   "zone)\n";
      break;
    case models::CompassZone::kNormal:
      break;
  }
  if (args.json) {
    PrintJson(model, decimal_year, result.field);
  } else {
    PrintText(model, args, decimal_year, result);
  }
  return 0;
}

}  // namespace

void AddFieldCommand(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<FieldArgs>();
  CLI::App* sub = app.add_subcommand(
      "field",
      "Print the World Magnetic Model (WMM2025) main field at a place and "
      "date: X north, Y east, Z down, H, F, inclination, declination");
  sub->add_option("LAT_DEG", args->lat_deg,
                  "Geodetic latitude, degrees (north positive)")
      ->required()
      ->check(NumberIn(-90.0, 90.0, "latitude in degrees, -90 to 90"));
  sub->add_option("LON_DEG", args->lon_deg,
                  "Longitude, degrees (east positive)")
      ->required()
      ->check(NumberIn(-360.0, 360.0, "longitude in degrees, -360 to 360"));
  sub->add_option("ALT_M", args->alt_m,
                  "Height above the WGS84 ellipsoid, metres")
      ->required()
      ->check(NumberIn(-100000.0, 1.0e8,
                       "height above the WGS84 ellipsoid in metres, "
                       "-100000 to 1e8"));
  sub->add_option("DATE", args->date,
                  "Date: YYYY-MM-DD[Thh:mm[:ss]] (UTC) or decimal year "
                  "(e.g. 2025.5)")
      ->required()
      ->check(DateText());
  sub->add_flag("--json", args->json,
                "Print one JSON object: model, decimal_year, x_nT, y_nT, "
                "z_nT, h_nT, f_nT, incl_deg, decl_deg");
  sub->add_option("--model", args->model_path,
                  "Coefficient file in NOAA's .COF layout (default: the "
                  "built-in WMM2025)")
      ->check(CLI::ExistingFile);
  sub->footer(
      "Negative coordinates are fine as they are (fluxtrim field -33.9 18.4 "
      "0 2025-06-30).\n");
  sub->callback([args, exit_code] { *exit_code = RunField(*args); });
}

}  // namespace fluxtrim::cli
