#pragma once
// The HTML report of `apply` (report.h) from the compensated output.

#include <string>

#include "io/table.h"
#include "proto/model.pb.h"
#include "src/core/apply_summary.h"
#include "src/core/report.h"

namespace fluxtrim::core {

// output: the table apply wrote (input channels + f_comp, f_interference,
// flags); summary: SummariseApply of it.
ReportData ApplyReportData(const proto::CompensationModel& model,
                           const std::string& model_file,
                           const io::Table& output,
                           const ApplySummaryResult& summary);

}  // namespace fluxtrim::core
