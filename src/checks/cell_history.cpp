#include "checks/cell_history.hpp"

#include <fcntl.h>
#include <sys/file.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <thread>

#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/road_load_json.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"

namespace loadtrim::checks {

namespace fs = std::filesystem;

std::optional<double> parse_utc_s(const std::string& iso) {
  int y, mo, d, h, mi;
  double s;
  char z = 0;
  int used = 0;
  if (std::sscanf(iso.c_str(), "%4d-%2d-%2dT%2d:%2d:%lf%c%n", &y, &mo, &d, &h, &mi, &s, &z, &used) != 7 ||
      z != 'Z' || static_cast<std::size_t>(used) != iso.size())
    return std::nullopt;
  if (mo < 1 || mo > 12 || d < 1 || d > 31 || h < 0 || h > 23 || mi < 0 || mi > 59 || !(s >= 0.0 && s < 61.0))
    return std::nullopt;
  std::tm t{};
  t.tm_year = y - 1900;
  t.tm_mon = mo - 1;
  t.tm_mday = d;
  t.tm_hour = h;
  t.tm_min = mi;
  t.tm_sec = 0;
  const std::time_t base = ::timegm(&t);
  if (base == static_cast<std::time_t>(-1)) return std::nullopt;
  // timegm carries a day the month does not have into the next month (30 February is 2 March): not a date.
  if (t.tm_year != y - 1900 || t.tm_mon != mo - 1 || t.tm_mday != d) return std::nullopt;
  return static_cast<double>(base) + s;
}

std::string utc_from_s(double epoch_s) {
  const double whole = std::floor(epoch_s);
  const std::time_t t = static_cast<std::time_t>(whole);
  std::tm tm{};
  ::gmtime_r(&t, &tm);
  char buf[96];
  const int ms = std::clamp(static_cast<int>(std::lround((epoch_s - whole) * 1000.0)), 0, 999);
  std::snprintf(buf, sizeof buf, "%04d-%02d-%02dT%02d:%02d:%02d.%03dZ", tm.tm_year + 1900, tm.tm_mon + 1,
                tm.tm_mday, tm.tm_hour, tm.tm_min, tm.tm_sec, ms);
  return buf;
}

CellHistory::CellHistory(const std::string& root, const std::string& cell_name) {
  dir_ = (fs::path(root) / record::identity_name(cell_name)).string();
  log_path_ = (fs::path(dir_) / "cell-log.jsonl").string();
  std::error_code ec;
  if (!fs::exists(log_path_, ec)) return;  // a cell with no history yet
  const record::VerifyResult v = record::read_log(log_path_, &records_);
  if (!v.ok) error_ = log_path_ + ": " + v.message;
}

namespace {
bool made_through(const nlohmann::json& r, const std::string& adapter) {
  return adapter.empty() || !r.contains("adapter") || r.value("adapter", "") == adapter;
}
}  // namespace

std::vector<core::CheckRecord> CellHistory::checks(const std::string& adapter) const {
  std::vector<core::CheckRecord> out;
  for (const auto& r : records_) {
    if (r.value("type", "") != "check" || !made_through(r, adapter)) continue;
    core::CheckRecord c;
    const auto t = parse_utc_s(r.value("utc", ""));
    if (!t || !core::parse(r.value("kind", ""), c.kind)) continue;
    c.utc_s = *t;
    c.passed = r.value("passed", false);
    out.push_back(c);
  }
  return out;
}

std::optional<core::RoadLoad> CellHistory::parasitic_curve(std::string* utc,
                                                           const std::string& adapter) const {
  std::optional<core::RoadLoad> out;
  for (const auto& r : records_)
    if (r.value("type", "") == "parasitic_curve" && made_through(r, adapter) &&
        record::is_road_load_json(r)) {
      out = record::road_load_from_json(r);  // the curve's members sit at the record's top
      if (utc) *utc = r.value("utc", "");
    }
  return out;
}

std::optional<double> CellHistory::maintenance_utc_s() const {
  std::optional<double> out;
  for (const auto& r : records_)
    if (r.value("type", "") == "maintenance")
      if (const auto t = parse_utc_s(r.value("utc", ""))) out = *t;
  return out;
}

namespace {
// How long an append waits for another writer of the same cell log (an append takes milliseconds; common
// practice, no source).
constexpr auto kCellLogLockWait = std::chrono::seconds(10);

// The exclusive lock every writer of a cell log holds while it appends (docs/records.md, "The cell log"): a
// flock(2) on the cell's directory, waited for at most kCellLogLockWait on the tool's own clock, released
// when this object is destroyed (closing the descriptor). flock belongs to the open file description: a
// holder in this process must not take it again (a second descriptor would wait for the first).
class CellLogLock {
 public:
  CellLogLock() = default;
  ~CellLogLock() {
    if (fd_ >= 0) ::close(fd_);
  }
  CellLogLock(const CellLogLock&) = delete;
  CellLogLock& operator=(const CellLogLock&) = delete;
  // Makes the cell's directory when new (fsync'd into checks/) and takes the lock; false with error.
  bool acquire(const std::string& dir, const std::string& log_path, std::string& error) {
    std::string err;
    if (!record::make_directories_durably(dir, err)) {
      error = err;
      return false;
    }
    fd_ = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
    if (fd_ < 0) {
      error = "cannot open " + dir + " to lock the cell log: " + std::strerror(errno);
      return false;
    }
    const auto give_up = std::chrono::steady_clock::now() + kCellLogLockWait;
    while (::flock(fd_, LOCK_EX | LOCK_NB) != 0) {
      if (errno != EWOULDBLOCK && errno != EINTR) {
        error = "cannot lock the cell log " + log_path + ": " + std::strerror(errno);
        return false;
      }
      if (std::chrono::steady_clock::now() >= give_up) {
        error = "the cell log " + log_path + " stayed locked by another writer for " +
                std::to_string(std::chrono::duration_cast<std::chrono::seconds>(kCellLogLockWait).count()) +
                " s; nothing was appended";
        return false;
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
    return true;
  }

 private:
  int fd_ = -1;
};

// Appends one record to the cell log; the caller holds its CellLogLock. repaired: a torn last line the open
// cut ("" when none).
bool append_locked(const std::string& log_path, const std::string& type, const nlohmann::json& payload,
                   const std::string& utc, std::string& repaired, std::string& error) {
  record::EventLog log(log_path);
  // A torn last line (a write cut short by a crash) is cut when the log is opened: said, never silent.
  if (!log.repaired().empty()) repaired = log_path + ": " + log.repaired();
  if (!log.append(type, payload, utc)) {
    error = log.error();
    return false;
  }
  return true;
}

// The cell log's "seal" record of a sealed folder.
nlohmann::json seal_payload(const record::SealInfo& s, const std::string& kind) {
  return {{"kind", kind},          {"folder", s.folder}, {"origin", s.origin}, {"chain_head", s.chain_head},
          {"seal", s.seal_sha256}, {"seal_seq", s.seq},  {"signer", s.signer}};
}

// The cell log's records as they are now (read under the caller's lock: what another writer appended since
// a CellHistory was made included), up to the first bad one.
std::vector<nlohmann::json> records_now(const std::string& log_path) {
  std::vector<nlohmann::json> recs;
  std::error_code ec;
  if (fs::exists(log_path, ec)) (void)record::read_log(log_path, &recs);
  return recs;
}

const nlohmann::json* seal_of_origin(const std::vector<nlohmann::json>& recs, const std::string& origin) {
  const nlohmann::json* found = nullptr;
  for (const auto& r : recs)
    if (r.value("type", "") == "seal" && r.value("origin", "") == origin) found = &r;
  return found;
}
}  // namespace

bool CellHistory::append(const std::string& type, nlohmann::json payload, const std::string& utc) {
  if (!ok()) return false;
  repaired_.clear();
  // Every writer of the cell log (a session's seal, a dyno check, `check record`, `check maintenance`,
  // resume's repair: several processes) appends under an exclusive lock on the cell's directory, so two never
  // append after the same record (docs/records.md). The cell's directory, when new, is fsync'd into checks/
  // (and the log's name into it by EventLog).
  CellLogLock lock;
  if (!lock.acquire(dir_, log_path_, error_)) return false;
  if (!append_locked(log_path_, type, payload, utc, repaired_, error_)) return false;
  payload["type"] = type;
  payload["utc"] = utc;
  records_.push_back(std::move(payload));
  return true;
}

bool CellHistory::append_seal(const record::SealInfo& s, const std::string& kind, const std::string& utc) {
  return append("seal", seal_payload(s, kind), utc);
}

bool seal_and_log(const std::string& folder, const record::SealRequest& request,
                  const std::string& checks_root, const std::string& kind, record::SealInfo* info,
                  std::string& error) {
  record::SealInfo local;
  record::SealInfo& s = info ? *info : local;
  s = {};
  CellHistory h(checks_root, request.cell);
  // One seal per folder identity: a copy of an unfinished folder, finished on its own, is refused rather than
  // sealed beside (and so breaking) the folder it was copied from. The check, the seal and the cell-log
  // append happen under one hold of the cell log's lock: a copy and its original finishing at the same moment
  // cannot both find no seal and both log one (docs/records.md, "The cell log").
  CellLogLock lock;
  std::string lock_error;
  const bool locked = lock.acquire(h.dir(), h.log_path(), lock_error);
  if (!locked) {
    error = "the folder " + folder + " was not sealed: " + lock_error;
    return false;
  }
  {
    const record::InsideFile ev = record::read_inside(folder, "events.jsonl");
    if (ev.status == record::InsideStatus::ok && !ev.content.empty()) {
      const std::string origin = record::sha256_hex(ev.content.substr(0, ev.content.find('\n')));
      const std::vector<nlohmann::json> logged = records_now(h.log_path());
      if (const nlohmann::json* r = seal_of_origin(logged, origin)) {
        error = "the cell log already holds a seal for this folder's origin (record " +
                std::to_string(r->value("seq", 0)) + ", folder " + r->value("folder", "?") +
                "): this folder is a copy of one already finished; it is not sealed";
        return false;
      }
    }
    // A log that cannot be read (missing, too large) is refused by seal_folder below, naming it.
  }
  if (!record::seal_folder(folder, request, &s, error)) return false;
  std::string repaired, append_error = h.error();
  const bool logged = h.ok() && append_locked(h.log_path(), "seal", seal_payload(s, kind), record::utc_now(),
                                              repaired, append_error);
  if (!repaired.empty()) s.notes.push_back(repaired);
  if (!logged) {
    error = "the folder " + s.folder + " is sealed, but the seal could not be added to the cell log " +
            h.log_path() + ": " + append_error;
    return false;
  }
  return true;
}

std::optional<std::uint64_t> logged_seal(const CellHistory& h, const std::string& origin) {
  std::optional<std::uint64_t> at;
  for (const auto& r : h.records())
    if (r.value("type", "") == "seal" && r.value("origin", "") == origin)
      at = r.value("seq", std::uint64_t{0});
  return at;
}

bool log_sealed_folder(const std::string& checks_root, const std::string& folder,
                       const record::FolderVerdict& v, bool& added, std::string& note, std::string& error) {
  added = false;
  note.clear();
  if (!v.intact() || !v.seal || !v.seal->is_signed || !v.seal->signature_checked) {
    error = "the folder's seal was not checked against a trusted key of its cell";
    return false;
  }
  CellHistory h(checks_root, v.seal->cell);
  if (!h.ok()) {
    error = "the cell log " + h.log_path() + " is damaged: " + h.error();
    return false;
  }
  if (logged_seal(h, v.origin)) return true;  // already there (verify compared it with the folder's seal)
  // Looked for again under the lock, with the append in the same hold: another process adding the same seal
  // (a resume of a copy of this folder) at the same moment never makes a second entry.
  CellLogLock lock;
  if (!lock.acquire(h.dir(), h.log_path(), error)) {
    error = "the seal could not be added to the cell log " + h.log_path() + ": " + error;
    return false;
  }
  if (seal_of_origin(records_now(h.log_path()), v.origin)) return true;
  record::SealInfo s;
  s.folder = fs::absolute(folder).lexically_normal().string();
  s.seq = v.seal->seq;
  s.origin = v.origin;
  s.chain_head = v.seal->chain_head;
  s.seal_sha256 = v.seal->seal_sha256;
  s.signer = v.seal->signer;
  s.files = v.seal->files;
  s.utc = v.seal->utc;
  const std::string kind =
      v.seal->result.is_object() && v.seal->result.contains("check") && v.seal->result["check"].is_string()
          ? v.seal->result["check"].get<std::string>()
          : std::string("session");
  std::string append_error;
  const bool ok =
      append_locked(h.log_path(), "seal", seal_payload(s, kind), record::utc_now(), note, append_error);
  if (!ok) {
    error = "the seal could not be added to the cell log " + h.log_path() + ": " + append_error;
    return false;
  }
  added = true;
  return true;
}

std::string Readiness::summary() const {
  if (!history_ok) return "the cell's check history cannot be trusted: " + history_error;
  if (blocking.empty()) return "all required dyno checks current";
  std::string s;
  for (const auto& b : blocking)
    s += std::string(s.empty() ? "" : "; ") + core::to_string(b.kind) + ": " + core::to_string(b.state) +
         " (" + b.why + ")";
  return s;
}

Readiness readiness(const CellHistory& h, const core::CheckProfile& profile, double now,
                    const std::string& adapter) {
  Readiness r;
  if (!h.ok()) {
    r.history_ok = false;
    r.history_error = h.error();
    return r;
  }
  const auto recs = h.checks(adapter);
  r.items = core::due_checks(recs, now, profile.due, h.maintenance_utc_s());
  for (const auto& it : r.items)
    if (it.due() &&
        std::find(profile.required.begin(), profile.required.end(), it.kind) != profile.required.end())
      r.blocking.push_back(it);
  return r;
}

nlohmann::json to_json(const Readiness& r) {
  nlohmann::json items = nlohmann::json::array();
  for (const auto& it : r.items) {
    nlohmann::json j = {{"check", core::to_string(it.kind)},
                        {"clause", it.clause},
                        {"rule", it.rule},
                        {"interval_days", it.interval_s / 86400.0},
                        {"state", core::to_string(it.state)},
                        {"due", it.due()},
                        {"why", it.why}};
    if (it.last_pass_utc_s) j["last_pass_utc"] = utc_from_s(*it.last_pass_utc_s);
    if (it.valid_until_utc_s) j["valid_until_utc"] = utc_from_s(*it.valid_until_utc_s);
    items.push_back(j);
  }
  return {{"history_ok", r.history_ok},
          {"history_error", r.history_error},
          {"may_start", r.may_start()},
          {"items", items},
          {"summary", r.summary()}};
}

}  // namespace loadtrim::checks
