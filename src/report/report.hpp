// The session report: one self-contained HTML file (inline CSS and SVG, no scripts, fonts or network), plus CSV
// exports, built from a session folder's log records and traces alone. Every number in its tables carries
// data-record / data-key attributes naming the log record and field it came from.
#pragma once

#include <string>

namespace loadtrim::report {

struct ReportFiles {
  bool ok = false;
  std::string error;
  std::string html, coefficients_csv, deviations_csv;  // paths written
  bool chain_ok = false;
};

// Writes report.html, coefficients.csv and deviations.csv into the folder.
ReportFiles write_report(const std::string& folder, const std::string& software_version);

// Prints report.html to report.pdf with headless Chromium; false with the reason when it could not.
bool print_pdf(const std::string& folder, std::string& error);

}  // namespace loadtrim::report
