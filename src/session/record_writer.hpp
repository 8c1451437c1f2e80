// The audit-log observer: writes every session event to the folder's hash-chained events.jsonl (fsync'd per
// record), each coast-down's trace to traces/run-NNN.csv with its SHA-256 in the record, summary.json at the
// end, and a human-readable operator.log (spdlog). Returns false from on_event when a record could not be
// made durable; the session then stops safely.
#pragma once

#include <memory>
#include <string>

#include "record/event_log.hpp"
#include "session/event_text.hpp"
#include "session/session.hpp"

namespace spdlog {
class logger;
}

namespace loadtrim::session {

class RecordWriter : public Observer {
 public:
  explicit RecordWriter(std::string folder);
  ~RecordWriter() override;
  bool on_event(const Event& e) override;
  std::string error() const override { return error_; }
  bool critical() const override { return true; }  // a record that cannot be written stops the session
  std::string name() const override { return "the session record"; }
  bool ok() const { return error_.empty(); }
  const std::string& folder() const { return folder_; }
  record::EventLog& log() { return *log_; }
  // Operator-log line without a log record (e.g. the console's view of a warning).
  void note(const std::string& text);
  // Flushes and closes the operator log and the event log: after this nothing more is written (the folder can
  // be sealed). Further events fail.
  void close();
  // The summary exactly as written to summary.json (null before): what a seal states as the result.
  const nlohmann::json& summary() const { return summary_; }

 private:
  std::string folder_;
  std::unique_ptr<record::EventLog> log_;
  std::shared_ptr<spdlog::logger> op_;
  std::string error_;
  TextContext text_;  // what operator.log has said so far (its sentences, session/event_text.hpp)
  nlohmann::json summary_;
};

}  // namespace loadtrim::session
