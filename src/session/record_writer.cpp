#include "session/record_writer.hpp"

#include <spdlog/sinks/basic_file_sink.h>
#include <spdlog/spdlog.h>

#include <cstdio>
#include <filesystem>

#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "session/event_text.hpp"

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

bool RecordWriter::on_event(const Event& ev) {
  if (!error_.empty()) return false;
  if (!log_) {
    error_ = "the record is closed";
    return false;
  }
  // The record: the event's own JSON and stamp, plus the files this writer wrote for it (their hashes
  // are the writer's to know, so they are the one thing the record adds to the event).
  nlohmann::json data = record_json(ev);
  const auto* coast = std::get_if<ev::Coastdown>(&ev.payload);
  if (coast && ev.trace) {
    char name[32];
    std::snprintf(name, sizeof name, "traces/run-%03d.csv", coast->record.run);
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
  const auto* fin = std::get_if<ev::Finished>(&ev.payload);
  if (fin && is_final(fin->summary.outcome)) {
    std::string err;
    const std::string text = data.dump(2) + "\n";
    if (!record::write_durable((fs::path(folder_) / "summary.json").string(), text, err)) {
      error_ = "cannot write summary.json: " + err;
      return false;
    }
    data["files"].push_back({{"path", "summary.json"}, {"sha256", record::sha256_hex(text)}});
    summary_ = nlohmann::json::parse(text);
  }
  if (!log_->append(type_of(ev), data, record::utc_now())) {
    error_ = log_->error();
    note("RECORD FAILURE: " + error_);
    return false;
  }
  if (std::holds_alternative<ev::ControllerIdentified>(ev.payload)) text_.connected = true;
  note(event_sentence(ev, text_));
  return true;
}

}  // namespace loadtrim::session
