// The session report: one self-contained HTML file (inline CSS and SVG, no scripts, fonts or network), plus
// CSV exports, built from a session folder's log records and traces alone. Every number in its tables carries
// data-record / data-key attributes naming the log record and field it came from.
#pragma once

#include <string>

#include "record/verify.hpp"

namespace loadtrim::report {

// How the CSV exports are written. The defaults suit a spreadsheet set to a decimal point: ',' between
// fields,
// '.' in numbers, SI units. decimal_comma: ';' between fields and ',' in numbers (a spreadsheet set to a
// decimal comma). us_units: every table in US units (A lbf, B lbf/mph, C lbf/mph², speeds in mph, forces in
// lbf; the exact NIST SP 811 factors of core/units.hpp).
struct CsvFormat {
  bool decimal_comma = false;
  bool us_units = false;
};

struct ReportFiles {
  bool ok = false;
  bool not_a_session_folder = false;  // no events.jsonl, or a log that is not a session's: nothing touched
  std::string error;
  std::string html, coefficients_csv, deviations_csv;  // paths written
  bool chain_ok = false;                               // intact (record::FolderVerdict::intact)
  std::string verify_outcome;  // record::to_string(outcome): verified, broken, not finished, ...
};

// Writes report.html, coefficients.csv and deviations.csv into a session folder. The first page states what
// verify finds (broken, not finished, sealed with or without a signature) and the sign-off. A folder that is
// not a session folder (no events.jsonl, or a log that is not a session's: not_a_session_folder) or whose
// events.jsonl cannot be read is refused before anything is written or removed. In a session folder, a record
// the report needs that lacks a member, or has one of another type, is named in error (never an exception);
// on any failure there the derived files of an earlier report (record::derived_files) are removed, so no
// stale report remains. Keys and cell logs for the seal's status come from the data root
// (record::find_data_root), or from options.
ReportFiles write_report(const std::string& folder, const std::string& software_version);
ReportFiles write_report(const std::string& folder, const std::string& software_version,
                         const record::VerifyOptions& options);
ReportFiles write_report(const std::string& folder, const std::string& software_version,
                         const CsvFormat& csv);
ReportFiles write_report(const std::string& folder, const std::string& software_version,
                         const record::VerifyOptions& options, const CsvFormat& csv);

// Prints report.html to report.pdf with headless Chromium; false with the reason when it could not. Every
// printed page carries the session id, the result and its page number (the report's @page margin boxes).
bool print_pdf(const std::string& folder, std::string& error);

}  // namespace loadtrim::report
