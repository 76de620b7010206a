#pragma once
// The HTML report of `fit` (report.h) from a fit result and its recording.

#include <string>

#include "io/table.h"
#include "src/core/fit.h"
#include "src/core/report.h"

namespace fluxtrim::core {

ReportData FitReportData(const FitResult& fit, const io::Table& recording,
                         const std::string& file,
                         const std::string& model_file);

}  // namespace fluxtrim::core
