#include "record/event_log.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <cerrno>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "record/sha256.hpp"

namespace loadtrim::record {

namespace {
const std::string kZeroHash(64, '0');
}

VerifyResult read_log(const std::string& path, std::vector<nlohmann::json>* records) {
  VerifyResult v;
  std::ifstream in(path, std::ios::binary);
  if (!in) {
    v.message = "cannot open " + path;
    return v;
  }
  std::string line, prev = kZeroHash;
  std::uint64_t n = 0;
  while (std::getline(in, line)) {
    if (in.eof()) {  // no '\n' at the end: a torn last write
      v.notes.push_back("last line is incomplete (a write cut short); ignored");
      break;
    }
    nlohmann::json j;
    try {
      j = nlohmann::json::parse(line);
    } catch (const std::exception&) {
      v.first_bad_record = static_cast<std::int64_t>(n);
      v.message = "record " + std::to_string(n) + " is not valid JSON";
      v.records = n;
      return v;
    }
    if (!j.is_object() || !j.contains("prev") || !j["prev"].is_string() || !j.contains("seq") ||
        !j["seq"].is_number_unsigned() || j["seq"].get<std::uint64_t>() != n) {
      v.first_bad_record = static_cast<std::int64_t>(n);
      v.message = "record " + std::to_string(n) + " lacks a valid seq or prev field";
      v.records = n;
      return v;
    }
    if (j["prev"].get<std::string>() != prev) {
      // Record n's "prev" does not match record n−1: either record n−1 was altered (the usual case: its content
      // changed, its own link did not) or record n's link was. The earlier one is named as the first broken record.
      v.first_bad_record = static_cast<std::int64_t>(n ? n - 1 : 0);
      v.message = n ? "record " + std::to_string(n - 1) + " was altered (record " + std::to_string(n) +
                          " no longer chains to it), or record " + std::to_string(n) + "'s link was"
                    : "record 0 does not start the chain";
      v.records = n;
      return v;
    }
    prev = sha256_hex(line);
    if (records) records->push_back(std::move(j));
    ++n;
  }
  v.ok = true;
  v.records = n;
  v.message = std::to_string(n) + " records, chain intact";
  return v;
}

EventLog::EventLog(std::string path) : path_(std::move(path)) {
  last_hash_ = kZeroHash;
  if (std::filesystem::exists(path_)) {
    std::vector<nlohmann::json> recs;
    const VerifyResult v = read_log(path_, &recs);
    if (!v.ok) {
      error_ = "existing log " + path_ + " is broken: " + v.message;
      return;
    }
    // Recompute the last hash and cut a torn tail, so appends continue a valid chain.
    std::ifstream in(path_, std::ios::binary);
    std::string line, all;
    std::uint64_t good_bytes = 0;
    while (std::getline(in, line)) {
      if (in.eof()) break;
      last_hash_ = sha256_hex(line);
      good_bytes += line.size() + 1;
    }
    in.close();
    if (std::filesystem::file_size(path_) != good_bytes) {
      std::filesystem::resize_file(path_, good_bytes);
      repaired_ = "cut an incomplete last line from the log";
    }
    next_seq_ = v.records;
  }
  // Test hook (the fault matrix): LOADTRIM_TEST_FAIL_WRITES_AFTER=N makes every append after the Nth record of this
  // process fail as a full disk would. Never set in production; documented in docs/session.md.
  if (const char* n = std::getenv("LOADTRIM_TEST_FAIL_WRITES_AFTER")) fail_after_ = std::strtoll(n, nullptr, 10);
  fd_ = ::open(path_.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0644);
  if (fd_ < 0) error_ = "cannot open " + path_ + " for appending: " + std::strerror(errno);
}

EventLog::~EventLog() {
  if (fd_ >= 0) ::close(fd_);
}

bool EventLog::append(const std::string& type, nlohmann::json payload, const std::string& utc) {
  if (fd_ < 0) {
    if (error_.empty()) error_ = "log not open";
    return false;
  }
  try {
    nlohmann::json j = nlohmann::json::object();
    j["seq"] = next_seq_;
    j["utc"] = utc;
    j["type"] = type;
    for (auto it = payload.begin(); payload.is_object() && it != payload.end(); ++it)
      if (it.key() != "seq" && it.key() != "prev" && it.key() != "type" && it.key() != "utc") j[it.key()] = it.value();
    j["prev"] = last_hash_;
    const std::string line = j.dump(-1, ' ', false, nlohmann::json::error_handler_t::replace);
    const std::string out = line + "\n";
    if (fail_after_ >= 0 && appended_ >= fail_after_) fail_writes_ = true;
    if (fail_writes_) {
      errno = ENOSPC;
      error_ = "cannot write to " + path_ + ": " + std::strerror(errno);
      return false;
    }
    std::size_t done = 0;
    while (done < out.size()) {
      const ssize_t w = ::write(fd_, out.data() + done, out.size() - done);
      if (w < 0) {
        if (errno == EINTR) continue;
        error_ = "cannot write to " + path_ + ": " + std::strerror(errno);
        return false;
      }
      done += static_cast<std::size_t>(w);
    }
    if (::fsync(fd_) != 0) {
      error_ = "cannot sync " + path_ + ": " + std::strerror(errno);
      return false;
    }
    last_hash_ = sha256_hex(line);
    ++next_seq_;
    ++appended_;
    return true;
  } catch (const std::exception& e) {
    error_ = std::string("cannot encode a log record: ") + e.what();
    return false;
  }
}

VerifyResult verify_session_folder(const std::string& folder) {
  namespace fs = std::filesystem;
  std::vector<nlohmann::json> recs;
  VerifyResult v = read_log((fs::path(folder) / "events.jsonl").string(), &recs);
  if (!v.ok) return v;
  int files = 0;
  for (const auto& r : recs) {
    if (!r.contains("files") || !r["files"].is_array()) continue;
    for (const auto& f : r["files"]) {
      if (!f.is_object() || !f.contains("path") || !f.contains("sha256")) continue;
      const std::string rel = f["path"].get<std::string>();
      const std::string actual = sha256_file((fs::path(folder) / rel).string());
      ++files;
      if (actual.empty()) {
        v.ok = false;
        v.first_bad_record = r["seq"].get<std::int64_t>();
        v.message = rel + " recorded in record " + std::to_string(v.first_bad_record) + " is missing";
        return v;
      }
      if (actual != f["sha256"].get<std::string>()) {
        v.ok = false;
        v.first_bad_record = r["seq"].get<std::int64_t>();
        v.message = rel + " does not match the SHA-256 recorded in record " + std::to_string(v.first_bad_record) +
                    ": the file was altered";
        return v;
      }
    }
  }
  v.message = std::to_string(v.records) + " records, chain intact, " + std::to_string(files) + " recorded files match";
  return v;
}

}  // namespace loadtrim::record
