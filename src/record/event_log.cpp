#include "record/event_log.hpp"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "record/inside.hpp"
#include "record/seal.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "record/verify.hpp"

namespace loadtrim::record {

namespace {
const std::string kZeroHash(64, '0');
}

bool json_nested_deeper_than(std::string_view text, std::size_t limit) {
  std::size_t depth = 0;
  bool in_string = false, escaped = false;
  for (const char c : text) {
    if (in_string) {
      if (escaped)
        escaped = false;
      else if (c == '\\')
        escaped = true;
      else if (c == '"')
        in_string = false;
    } else if (c == '"') {
      in_string = true;
    } else if (c == '[' || c == '{') {
      if (++depth > limit) return true;
    } else if ((c == ']' || c == '}') && depth > 0) {
      --depth;
    }
  }
  return false;
}

nlohmann::json parse_record_json(std::string_view text, bool* too_deep) {
  const bool deep = json_nested_deeper_than(text, kMaxRecordDepth);
  if (too_deep) *too_deep = deep;
  if (deep) return nlohmann::json(nlohmann::json::value_t::discarded);
  return nlohmann::json::parse(text, nullptr, false);
}

VerifyResult parse_log(const std::string& text, std::vector<LogLine>* lines, bool* torn) {
  VerifyResult v;
  if (torn) *torn = false;
  std::string prev = kZeroHash;
  std::uint64_t n = 0;
  std::size_t pos = 0;
  while (pos < text.size()) {
    const auto nl = text.find('\n', pos);
    if (nl == std::string::npos) {  // no '\n' at the end: a torn last write
      v.notes.push_back("last line is incomplete (a write cut short); ignored");
      if (torn) *torn = true;
      break;
    }
    const std::string line = text.substr(pos, nl - pos);
    pos = nl + 1;
    bool too_deep = false;
    nlohmann::json j = parse_record_json(line, &too_deep);
    if (j.is_discarded()) {
      v.first_bad_record = static_cast<std::int64_t>(n);
      v.message = "record " + std::to_string(n) +
                  (too_deep ? " nests arrays and objects deeper than " + std::to_string(kMaxRecordDepth) +
                                  " levels (no record loadtrim writes does)"
                            : std::string(" is not valid JSON"));
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
      // Record n's "prev" does not match record n−1: either record n−1 was altered (the usual case: its
      // content changed, its own link did not) or record n's link was. The earlier one is named as the first
      // broken record.
      v.first_bad_record = static_cast<std::int64_t>(n ? n - 1 : 0);
      v.message = n ? "record " + std::to_string(n - 1) + " was altered (record " + std::to_string(n) +
                          " no longer chains to it), or record " + std::to_string(n) + "'s link was"
                    : "record 0 does not start the chain";
      v.records = n;
      return v;
    }
    prev = sha256_hex(line);
    if (lines) lines->push_back({std::move(j), line, prev});
    ++n;
  }
  v.ok = true;
  v.records = n;
  v.message = std::to_string(n) + " records, chain intact";
  return v;
}

VerifyResult read_log(const std::string& path, std::vector<nlohmann::json>* records) {
  // Read whole under the limit on a record file (record/inside.hpp, kMaxRecordFileBytes): a log of gigabytes
  // is a finding naming it, never an allocation failure.
  const InsideFile f = read_file_whole(path);
  if (f.status != InsideStatus::ok) {
    VerifyResult v;
    v.message = f.status == InsideStatus::missing ? "cannot open " + path : f.error;
    return v;
  }
  std::vector<LogLine> lines;
  VerifyResult v = parse_log(f.content, &lines);
  if (records)
    for (auto& l : lines) records->push_back(std::move(l.record));
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
    first_signed_ = !recs.empty() && recs.front().contains("sig");
  }
  // Test hook (the fault matrix): LOADTRIM_TEST_FAIL_WRITES_AFTER=N makes every append after the Nth record
  // of this process fail as a full disk would. Never set in production; documented in docs/session.md.
  if (const char* n = std::getenv("LOADTRIM_TEST_FAIL_WRITES_AFTER"))
    fail_after_ = std::strtoll(n, nullptr, 10);
  std::error_code ec;
  const bool created = !std::filesystem::exists(path_, ec);
  fd_ = ::open(path_.c_str(), O_WRONLY | O_CREAT | O_APPEND | O_CLOEXEC, 0644);
  if (fd_ < 0) {
    error_ = "cannot open " + path_ + " for appending: " + std::strerror(errno);
    return;
  }
  struct stat st {};
  if (::fstat(fd_, &st) != 0) {
    error_ = "cannot examine " + path_ + ": " + std::strerror(errno);
    ::close(fd_);
    fd_ = -1;
    return;
  }
  good_bytes_ = static_cast<std::uint64_t>(st.st_size);
  // A new log's name is fsync'd into its folder before the first record is confirmed: a record that append()
  // confirmed must not vanish with the file's directory entry (docs/records.md, "The chain").
  if (created) {
    std::string err;
    if (!sync_directory(std::filesystem::path(path_).parent_path().string(), err)) {
      error_ = "cannot make the new log " + path_ + " durable: " + err;
      ::close(fd_);
      fd_ = -1;
    }
  }
}

EventLog::~EventLog() {
  if (fd_ >= 0) ::close(fd_);
}

bool split_record_signature(const std::string& line, std::string& signed_text, std::string& sig_hex) {
  static const std::string head = ",\"sig\":\"";
  const std::size_t n = head.size() + 128 + 2;  // ,"sig":" + 128 hex + "}
  if (line.size() <= n || line.compare(line.size() - n, head.size(), head) != 0 ||
      line.compare(line.size() - 2, 2, "\"}") != 0)
    return false;
  sig_hex = line.substr(line.size() - 130, 128);
  for (char ch : sig_hex)
    if (!((ch >= '0' && ch <= '9') || (ch >= 'a' && ch <= 'f'))) return false;
  signed_text = line.substr(0, line.size() - n) + "}";
  return true;
}

bool EventLog::set_signer(const SigningKey* key) {
  if (key && next_seq_ > 0 && !first_signed_) return false;
  signer_ = key;
  return true;
}

bool EventLog::fail_append(const std::string& what) {
  error_ = what;
  // Whatever reached the file of this record is cut off again, so the log ends at its last good record (a
  // later reader sees no torn or unconfirmed line), and the log takes no more records: its state on disk is
  // no longer known for sure (docs/records.md, "The chain").
  if (::ftruncate(fd_, static_cast<off_t>(good_bytes_)) != 0 || ::fsync(fd_) != 0)
    error_ +=
        "; and the unconfirmed record could not be cut off again (" + std::string(std::strerror(errno)) + ")";
  poisoned_ = true;
  return false;
}

bool EventLog::append(const std::string& type, nlohmann::json payload, const std::string& utc) {
  if (fd_ < 0) {
    if (error_.empty()) error_ = "log not open";
    return false;
  }
  if (poisoned_) return false;  // error_ still names the first failure
  try {
    nlohmann::json j = nlohmann::json::object();
    j["seq"] = next_seq_;
    j["utc"] = utc;
    j["type"] = type;
    for (auto it = payload.begin(); payload.is_object() && it != payload.end(); ++it)
      if (it.key() != "seq" && it.key() != "prev" && it.key() != "type" && it.key() != "utc" &&
          it.key() != "sig" && it.key() != "record_signer")
        j[it.key()] = it.value();
    j["prev"] = last_hash_;
    if (signer_ && next_seq_ == 0) j["record_signer"] = signer_->fingerprint();
    std::string line = j.dump(-1, ' ', false, nlohmann::json::error_handler_t::replace);
    if (signer_) {
      std::string sig, err;
      if (!signer_->sign(std::string(kRecordSigDomain) + line, sig, err)) {
        error_ = "cannot sign a record of " + path_ + ": " + err;
        return false;
      }
      line.pop_back();  // the closing '}'
      line += ",\"sig\":\"" + sig + "\"}";
    }
    const std::string out = line + "\n";
    if (fail_after_ >= 0 && appended_ >= fail_after_) fail_writes_ = true;
    if (fail_writes_) {
      errno = ENOSPC;
      return fail_append("cannot write to " + path_ + ": " + std::strerror(errno));
    }
    std::size_t done = 0;
    while (done < out.size()) {
      std::size_t n = out.size() - done;
      if (short_write_ >= 0) {  // test hook: the disk takes this many bytes of the line, then no more
        if (done >= static_cast<std::size_t>(short_write_)) {
          short_write_ = -1;
          errno = ENOSPC;
          return fail_append("cannot write to " + path_ + ": " + std::strerror(errno));
        }
        n = std::min(n, static_cast<std::size_t>(short_write_) - done);
      }
      const ssize_t w = ::write(fd_, out.data() + done, n);
      if (w < 0) {
        if (errno == EINTR) continue;
        return fail_append("cannot write to " + path_ + ": " + std::strerror(errno));
      }
      done += static_cast<std::size_t>(w);
    }
    if (fail_sync_) {  // test hook: the line was written, its fsync fails
      fail_sync_ = false;
      errno = EIO;
      return fail_append("cannot sync " + path_ + ": " + std::strerror(errno));
    }
    if (::fsync(fd_) != 0) return fail_append("cannot sync " + path_ + ": " + std::strerror(errno));
    good_bytes_ += out.size();
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
  const FolderVerdict f = verify_folder(folder);
  VerifyResult v;
  v.ok = f.intact();
  v.records = f.records;
  v.first_bad_record = f.outcome == Outcome::broken ? f.record : -1;
  v.message = f.message;
  v.notes = f.notes;
  return v;
}

}  // namespace loadtrim::record
