#include "session/record_writer.hpp"

#include <spdlog/sinks/basic_file_sink.h>
#include <spdlog/spdlog.h>

#include <cstdio>
#include <filesystem>

#include "record/session_folder.hpp"
#include "record/sha256.hpp"

namespace loadtrim::session {

namespace fs = std::filesystem;

RecordWriter::RecordWriter(std::string folder) : folder_(std::move(folder)) {
  std::error_code ec;
  fs::create_directories(fs::path(folder_) / "traces", ec);
  if (ec) error_ = "cannot create " + folder_ + "/traces: " + ec.message();
  log_ = std::make_unique<record::EventLog>((fs::path(folder_) / "events.jsonl").string());
  if (!log_->error().empty() && error_.empty()) error_ = log_->error();
  try {
    auto sink = std::make_shared<spdlog::sinks::basic_file_sink_mt>(
        (fs::path(folder_) / "operator.log").string(), false);
    op_ = std::make_shared<spdlog::logger>("operator", sink);
    op_->set_pattern("%Y-%m-%dT%H:%M:%S.%eZ %v", spdlog::pattern_time_type::utc);
    op_->flush_on(spdlog::level::info);
  } catch (const std::exception& e) {
    if (error_.empty()) error_ = std::string("cannot open operator.log: ") + e.what();
  }
  if (!log_->repaired().empty()) note("log: " + log_->repaired());
}

RecordWriter::~RecordWriter() = default;

void RecordWriter::close() {
  try {
    if (op_) op_->flush();
  } catch (...) {
  }
  op_.reset();
  log_.reset();
}

void RecordWriter::note(const std::string& text) {
  try {
    if (op_) op_->info(text);
  } catch (...) {  // the operator log never throws into the session
  }
}

namespace {
std::string human(const Event& e) {
  const auto& d = e.data;
  auto coef = [](const nlohmann::json& c) {
    char b[128];
    std::snprintf(b, sizeof b, "(%.2f N, %.4f N/(km/h), %.5f N/(km/h)^2)", c.value("f0_n", 0.0),
                  c.value("f1_n_per_kmh", 0.0), c.value("f2_n_per_kmh2", 0.0));
    return std::string(b);
  };
  if (e.type == "state")
    return "state " + d.value("from", "") + " -> " + d.value("to", "") +
           (d.value("why", "").empty() ? "" : " (" + d.value("why", "") + ")");
  if (e.type == "coastdown") {
    if (!d.value("usable", false))
      return "coast-down " + std::to_string(d.value("run", 0)) +
             " unusable: " + d.value("unusable_reason", "");
    char b[96];
    std::snprintf(b, sizeof b, " worst %.2f N -> ", d["check"].value("worst_abs_deviation_n", 0.0));
    return "coast-down " + std::to_string(d.value("run", 0)) + ": set " + coef(d["set"]) + " measured " +
           coef(d["simulated"]) + b + (d["check"].value("pass", false) ? "pass" : "FAIL") + "; " +
           d["decision"].value("reason", "");
  }
  if (e.type == "first_setting") return "first setting (" + d.value("strategy", "") + "): " + coef(d["set"]);
  if (e.type == "finished") return "finished: " + d.value("result", "") + " — " + d.value("stop_reason", "");
  return e.type + " " + d.dump();
}
}  // namespace

bool RecordWriter::on_event(const Event& ev) {
  if (!error_.empty()) return false;
  if (!log_) {
    error_ = "the record is closed";
    return false;
  }
  nlohmann::json data = ev.data;
  if (ev.trace) {
    char name[32];
    std::snprintf(name, sizeof name, "traces/run-%03d.csv", data.value("run", 0));
    const std::string csv = record::trace_csv(*ev.trace);
    std::string err;
    if (!record::write_durable((fs::path(folder_) / name).string(), csv, err)) {
      error_ = "cannot write the trace: " + err;
      return false;
    }
    data["files"].push_back(
        {{"path", name}, {"sha256", record::sha256_hex(csv)}, {"samples", ev.trace->size()}});
  }
  // summary.json is written once, when the session's result is final: an interrupted session's "finished"
  // record holds its summary inline, and the file is written (and sealed) only when a resume reaches the
  // verdict. Nothing whose hash a record holds is ever rewritten (docs/records.md).
  if (ev.type == "finished" && is_final(data.value("result", ""))) {
    std::string err;
    const std::string text = data.dump(2) + "\n";
    if (!record::write_durable((fs::path(folder_) / "summary.json").string(), text, err)) {
      error_ = "cannot write summary.json: " + err;
      return false;
    }
    data["files"].push_back({{"path", "summary.json"}, {"sha256", record::sha256_hex(text)}});
    summary_ = nlohmann::json::parse(text);
  }
  if (!log_->append(ev.type, data, record::utc_now())) {
    error_ = log_->error();
    note("RECORD FAILURE: " + error_);
    return false;
  }
  note(human({ev.type, data, nullptr}));
  return true;
}

}  // namespace loadtrim::session
