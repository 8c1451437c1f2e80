#include "store/index.hpp"

#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <stdexcept>

#include "core/profile.hpp"
#include "record/data_root.hpp"
#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/vehicle_history.hpp"
#include "store/pg_store.hpp"

namespace loadtrim::store {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

// A record lacking a member the index needs, or holding one of another type. Caught in read_folder.
struct Missing : std::runtime_error {
  using std::runtime_error::runtime_error;
};

std::string where(const json& r) {
  return "record " + (r.contains("seq") ? r["seq"].dump() : std::string("?")) + " (" +
         r.value("type", std::string("?")) + ")";
}

const json* member(const json& r, const std::string& key, bool required) {
  if (r.is_object() && r.contains(key) && !r[key].is_null()) return &r[key];
  if (required) throw Missing(where(r) + " has no \"" + key + "\"");
  return nullptr;
}

std::string text(const json& r, const std::string& key, bool required = false) {
  const json* v = member(r, key, required);
  if (!v) return "";
  if (!v->is_string()) throw Missing(where(r) + ": \"" + key + "\" is not a string");
  return v->get<std::string>();
}

std::optional<double> number(const json& r, const std::string& key, bool required = false) {
  const json* v = member(r, key, required);
  if (!v) return std::nullopt;
  if (!v->is_number()) throw Missing(where(r) + ": \"" + key + "\" is not a number");
  return v->get<double>();
}

std::optional<bool> boolean(const json& r, const std::string& key, bool required = false) {
  const json* v = member(r, key, required);
  if (!v) return std::nullopt;
  if (!v->is_boolean()) throw Missing(where(r) + ": \"" + key + "\" is not true or false");
  return v->get<bool>();
}

int integer(const json& r, const std::string& key) {
  const json* v = member(r, key, false);
  if (!v) return 0;
  if (!v->is_number_integer()) throw Missing(where(r) + ": \"" + key + "\" is not an integer");
  return v->get<int>();
}

// A road-load curve as every record spells it: {"f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"} (docs/session.md).
std::optional<core::RoadLoad> road_load(const json& r, const std::string& key, bool required = false) {
  const json* v = member(r, key, required);
  if (!v) return std::nullopt;
  for (const char* k : {"f0_n", "f1_n_per_kmh", "f2_n_per_kmh2"}) {
    if (!v->is_object() || !v->contains(k) || !(*v)[k].is_number())
      throw Missing(where(r) + ": \"" + key + "\" has no number \"" + k + "\"");
  }
  return core::RoadLoad{(*v)["f0_n"].get<double>(), (*v)["f1_n_per_kmh"].get<double>(),
                        (*v)["f2_n_per_kmh2"].get<double>()};
}

std::vector<SpeedDeviation> deviations(const json& r, const std::string& key) {
  std::vector<SpeedDeviation> out;
  const json* v = member(r, key, false);
  if (!v) return out;
  if (!v->is_array()) throw Missing(where(r) + ": \"" + key + "\" is not a list");
  for (const json& row : *v) {
    json tagged = row;
    tagged["seq"] = r.value("seq", json());
    tagged["type"] = r.value("type", std::string("?")) + "." + key;
    SpeedDeviation d;
    d.speed_kmh = *number(tagged, "speed_kmh", true);
    d.target_n = *number(tagged, "target_n", true);
    d.measured_n = *number(tagged, "measured_n", true);
    d.deviation_n = *number(tagged, "deviation_n", true);
    d.limit_n = number(tagged, "limit_n").value_or(0.0);
    d.u_n = number(tagged, "u_n");
    d.pass = *boolean(tagged, "pass", true);
    out.push_back(d);
  }
  return out;
}

std::string operator_name(const json& r) {
  const json* o = member(r, "operator", false);
  if (!o) return "";
  if (o->is_object()) return o->value("name", std::string());
  return o->is_string() ? o->get<std::string>() : std::string();
}

FolderFacts facts_of(const std::string& folder, const json& r0, const record::FolderVerdict& v) {
  FolderFacts f;
  f.folder = folder;
  f.name = fs::path(folder).filename().string();
  f.origin = v.origin;
  f.cell = v.seal ? v.seal->cell : v.cell;
  f.operator_name = operator_name(r0);
  f.started_utc = text(r0, "utc", true);
  if (v.seal) {
    f.sealed_utc = v.seal->utc;
    f.chain_head = v.seal->chain_head;
    f.seal_sha256 = v.seal->seal_sha256;
    f.signer = v.seal->signer;
  }
  f.verify_outcome = record::to_string(v.outcome);
  return f;
}

SessionEntry read_session(const std::string& folder, const std::vector<record::LogLine>& lines,
                          const record::FolderVerdict& v) {
  const json& r0 = lines.front().record;
  SessionEntry e;
  e.facts = facts_of(folder, r0, v);
  e.vehicle = text(r0, "vehicle", true);
  if (e.facts.cell.empty()) e.facts.cell = text(r0, "cell", true);
  e.vehicle_description = text(r0, "vehicle_description");
  e.profile = text(r0, "profile");
  e.standard = text(r0, "standard");
  e.method = text(r0, "method");
  e.first_setting_requested = text(r0, "first_setting_requested");
  e.target = *road_load(r0, "target", true);
  e.tolerance_n = number(r0, "tolerance_n");
  e.test_mass_kg = number(r0, "test_mass_kg");
  bool first_setting_seen = false, warm_up_seen = false;
  for (const auto& line : lines) {
    const json& r = line.record;
    const std::string type = r.value("type", std::string());
    if (type == "warm_up" && !warm_up_seen) {
      // The first warm-up hold, when it was the session's initial one (not after a pause or a resume).
      warm_up_seen = true;
      e.warm_up = record::initial_warm_up_from_record(r);
    } else if (type == "first_setting" &&
               !first_setting_seen) {  // the first setting is the first one recorded
      first_setting_seen = true;
      e.first_setting_strategy = text(r, "strategy");
      e.first_setting_fallback = text(r, "fallback_reason");
    } else if (type == "coastdown") {
      CoastdownEntry c;
      c.seq = r.value("seq", std::uint64_t{0});
      c.run = integer(r, "run");
      c.usable = boolean(r, "usable").value_or(false);
      c.unusable_reason = text(r, "unusable_reason");
      c.set = road_load(r, "set");
      // "measured" (earlier folders wrote "simulated", which the report still reads: docs/session.md)
      c.measured = r.contains("measured") ? road_load(r, "measured") : road_load(r, "simulated");
      c.cell_time_s = number(r, "cell_time_s");
      if (const json* chk = member(r, "check", false)) {
        json tagged = *chk;
        tagged["seq"] = r.value("seq", json());
        tagged["type"] = "coastdown.check";
        c.passed = boolean(tagged, "pass");
        c.worst_abs_deviation_n = number(tagged, "worst_abs_deviation_n");
        c.deviations = deviations(tagged, "rows");
      }
      e.coastdown_records.push_back(std::move(c));
    }
  }
  // The result is what the seal states (verify checked that summary.json agrees with it).
  json result = v.seal->result;
  result["seq"] = v.seal->seq;
  result["type"] = "seal.result";
  e.result = text(result, "result", true);
  e.accepted = *boolean(result, "accepted", true);
  e.stop_reason = text(result, "stop_reason");
  e.iterations = integer(result, "iterations");
  e.coastdowns = integer(result, "coastdowns");
  e.usable_coastdowns = integer(result, "usable_coastdowns");
  e.cell_time_s = number(result, "cell_time_s");
  if (e.first_setting_strategy.empty()) e.first_setting_strategy = text(result, "first_setting");
  e.final_set = road_load(result, "final_set");
  e.measured = road_load(result, "measured");
  e.final_deviations = deviations(result, "deviations");
  for (const auto& a : v.approvals)
    e.reviews.push_back({a.seq, a.reviewer, a.utc, a.statement, a.signature_checked});
  return e;
}

CheckEntry read_check(const std::string& folder, const std::vector<record::LogLine>& lines,
                      const record::FolderVerdict& v) {
  const json& r0 = lines.front().record;
  CheckEntry e;
  e.facts = facts_of(folder, r0, v);
  if (e.facts.cell.empty()) e.facts.cell = text(r0, "cell", true);
  e.kind = text(r0, "check", true);
  const json* fin = nullptr;
  for (const auto& line : lines)
    if (line.record.value("type", std::string()) == "check_finished") fin = &line.record;
  if (!fin) throw Missing("the folder has no check_finished record");
  e.end = text(*fin, "end");
  e.passed = *boolean(*fin, "passed", true);
  e.verdict = text(*fin, "verdict");
  return e;
}

std::string absolute_folder(const std::string& folder) {
  std::error_code ec;
  fs::path p = fs::absolute(folder, ec);
  if (ec) p = folder;
  std::string s = p.lexically_normal().string();
  while (s.size() > 1 && s.back() == '/') s.pop_back();
  return s;
}

}  // namespace

FolderEntry read_folder(const std::string& folder, const record::FolderVerdict& verdict) {
  FolderEntry out;
  const record::InsideFile log = record::read_inside(folder, "events.jsonl");
  if (log.status != record::InsideStatus::ok) {
    out.error = log.error;
    return out;
  }
  std::vector<record::LogLine> lines;
  const record::VerifyResult chain = record::parse_log(log.content, &lines);
  if (!chain.ok || lines.empty()) {
    out.error = "events.jsonl: " + (chain.message.empty() ? std::string("no records") : chain.message);
    return out;
  }
  if (!verdict.seal) {
    out.error = "the folder has no seal";
    return out;
  }
  const std::string type = lines.front().record.value("type", std::string());
  const std::string abs = absolute_folder(folder);
  try {
    if (type == "session_started")
      out.session = read_session(abs, lines, verdict);
    else if (type == "check_started")
      out.check = read_check(abs, lines, verdict);
    else
      out.error = "record 0 is \"" + type + "\", neither session_started nor check_started";
  } catch (const std::exception& e) {
    out.error = e.what();
  }
  return out;
}

int IngestResult::exit_code() const {
  switch (status) {
    case IngestStatus::indexed:
    case IngestStatus::refreshed:
      return 0;
    case IngestStatus::refused:
      return 2;
    case IngestStatus::broken:
    case IngestStatus::store_failed:
      return 5;
  }
  return 5;
}

IngestResult ingest_folder(Store& store, const std::string& folder, const record::VerifyOptions& options) {
  IngestResult r;
  std::error_code ec;
  if (!fs::is_directory(folder, ec)) {
    r.message = folder + ": not a folder; give a session or dyno-check folder";
    return r;
  }
  const record::FolderVerdict v = record::verify_folder(folder, options);
  if (v.outcome == record::Outcome::broken) {
    r.status = IngestStatus::broken;
    r.message = folder + ": refused, it does not verify (broken): " + v.message +
                (v.record >= 0 ? "; first broken record: " + std::to_string(v.record) : std::string()) +
                (v.file.empty() ? std::string() : "; file: " + v.file) + "; not indexed";
    return r;
  }
  if (v.outcome == record::Outcome::not_finished || !v.seal) {
    r.message = folder + ": refused, not finished (no seal): " + v.message +
                "; a running session, or one to finish with `loadtrim resume`; not indexed";
    return r;
  }
  const FolderEntry entry = read_folder(folder, v);
  if (!entry.error.empty()) {
    r.message = folder + ": refused, not a session or dyno-check folder the store can index: " + entry.error;
    return r;
  }
  r.what = entry.session ? "session" : "check";
  PutResult put = PutResult::indexed;
  std::string err;
  const bool ok =
      entry.session ? store.put_session(*entry.session, put, err) : store.put_check(*entry.check, put, err);
  if (!ok) {
    r.status = IngestStatus::store_failed;
    r.message = err;
    return r;
  }
  const FolderFacts& f = entry.session ? entry.session->facts : entry.check->facts;
  const std::string outcome = std::string(" (") + record::to_string(v.outcome) + ")";
  switch (put) {
    case PutResult::indexed:
      r.status = IngestStatus::indexed;
      r.message = "indexed " + r.what + " " + f.name + outcome;
      break;
    case PutResult::refreshed:
      r.status = IngestStatus::refreshed;
      r.message = "already indexed " + r.what + " " + f.name + ": brought up to date" + outcome;
      break;
    case PutResult::conflict:
      r.status = IngestStatus::broken;
      r.message = folder + ": refused, the store holds this folder (origin " + f.origin +
                  ") with another seal: one of the two was cut back and sealed again; nothing changed";
      break;
  }
  return r;
}

namespace {
// check_row, also handing back the verdict when the folder verified (for callers that read the folder next).
std::optional<CheckFinding> check_row_verdict(const IndexedFolder& row, const record::VerifyOptions& options,
                                              record::FolderVerdict* verdict_out) {
  std::error_code ec;
  if (!fs::is_directory(row.folder, ec))
    return CheckFinding{row, "missing", row.what + " folder " + row.folder + " is missing"};
  record::FolderVerdict v = record::verify_folder(row.folder, options);
  if (v.outcome == record::Outcome::broken)
    return CheckFinding{row, "broken",
                        row.what + " folder " + row.folder + " no longer verifies (broken): " + v.message};
  if (v.outcome == record::Outcome::not_finished || !v.seal)
    return CheckFinding{
        row, "not finished",
        row.what + " folder " + row.folder + " has lost its seal (not finished): " + v.message};
  if (v.origin != row.origin)
    return CheckFinding{row, "another folder",
                        row.what + " folder " + row.folder + " is another folder now (origin " + v.origin +
                            ", indexed " + row.origin + ")"};
  if (v.seal->seal_sha256 != row.seal_sha256)
    return CheckFinding{row, "another seal",
                        row.what + " folder " + row.folder + " carries another seal than the one indexed"};
  if (verdict_out) *verdict_out = std::move(v);
  return std::nullopt;
}

bool same_load(const core::RoadLoad& a, const core::RoadLoad& b) {
  auto same = [](double x, double y) {
    return std::isfinite(x) && std::isfinite(y) && std::abs(x - y) <= 1e-9 * std::max(1.0, std::abs(y));
  };
  return same(a.f0_n, b.f0_n) && same(a.f1_n_per_kmh, b.f1_n_per_kmh) &&
         same(a.f2_n_per_kmh2, b.f2_n_per_kmh2);
}
}  // namespace

std::optional<CheckFinding> check_row(const IndexedFolder& row, const record::VerifyOptions& options) {
  return check_row_verdict(row, options, nullptr);
}

VerifiedSession verify_accepted_folder(const AcceptedSession& a, const record::VerifyOptions& options) {
  const IndexedFolder row{"session", a.folder, a.origin, a.seal_sha256, ""};
  VerifiedSession out;
  record::FolderVerdict v;
  if (auto f = check_row_verdict(row, options, &v)) {
    out.finding = std::move(f);
    return out;
  }
  FolderEntry e = read_folder(a.folder, v);
  if (!e.session) {
    out.finding = CheckFinding{
        row, "differs",
        "session folder " + a.folder + " says another kind of record (" + e.error + ") than the store's row"};
    return out;
  }
  out.session = std::move(*e.session);
  return out;
}

std::optional<CheckFinding> compare_accepted_row(const AcceptedSession& a, const VerifiedSession& folder) {
  if (folder.finding) return folder.finding;
  const IndexedFolder row{"session", a.folder, a.origin, a.seal_sha256, ""};
  // The row is only what the folder said when it was indexed: its name, start time, vehicle, cell, result,
  // target and final set are believed only when the folder says the same now.
  auto differs = [&](const std::string& what) {
    return CheckFinding{row, "differs",
                        "session folder " + a.folder + " says another " + what + " than the store's row"};
  };
  if (!folder.session) return differs("kind of record");
  const SessionEntry& s = *folder.session;
  // The name and start time decide which session is the newest on a cell and which pairs are the newest.
  if (s.facts.name != a.name) return differs("name (" + s.facts.name + ")");
  if (s.facts.started_utc != a.started_utc) return differs("start time (" + s.facts.started_utc + ")");
  if (s.vehicle != a.vehicle) return differs("vehicle (" + s.vehicle + ")");
  if (s.facts.cell != a.cell) return differs("cell (" + s.facts.cell + ")");
  if (!s.accepted) return differs("result (" + s.result + ")");
  if (!same_load(s.target, a.target)) return differs("target");
  if (!s.final_set || !same_load(*s.final_set, a.final_set)) return differs("final set");
  return std::nullopt;
}

bool check_store(Store& store, const record::VerifyOptions& options, std::vector<CheckFinding>& findings,
                 std::size_t& rows_checked, std::string& error) {
  std::vector<IndexedFolder> rows;
  if (!store.folders(rows, error)) return false;
  findings.clear();
  rows_checked = rows.size();
  for (const auto& row : rows)
    if (auto f = check_row(row, options)) findings.push_back(std::move(*f));
  return true;
}

namespace {
constexpr const char* kPgForms =
    "allowed: a libpq connection string such as \"host=db.lab port=5432 dbname=loadtrim user=cell\", or a "
    "URI "
    "postgresql://[user@]host[:port]/dbname[?param=value...]";
constexpr const char* kSqliteForms =
    "allowed: a path to the SQLite file, absolute or relative to the data root";
}  // namespace

StorePath resolve_store_path(const std::string& option, const std::string& cwd,
                             const std::optional<std::string>& system_config,
                             const std::string& system_config_path, const std::string& data_root) {
  StorePath s;
  auto normal = [](const fs::path& p) {
    std::string x = p.lexically_normal().string();
    while (x.size() > 1 && x.back() == '/') x.pop_back();
    return x;
  };
  if (!option.empty()) {
    if (is_postgresql_uri(option)) {
      std::string why;
      if (!describe_conninfo(option, s.server, why)) {
        s.error = "--store: " + why + " (" + kPgForms + "; anything else is an SQLite file)";
        return s;
      }
      s.engine = "postgresql";
      s.path = option;
      s.source = "--store";
      return s;
    }
    const fs::path p(option);
    s.path = normal(p.is_absolute() || cwd.empty() ? p : fs::path(cwd) / p);
    s.source = "--store";
    return s;
  }
  if (system_config) {
    std::string err;
    const auto v = record::toml_string_value(*system_config, "store", "sqlite", &err);
    if (!err.empty()) {
      s.error = system_config_path + ": " + err + " (" + kSqliteForms + ")";
      return s;
    }
    const auto pg = record::toml_string_value(*system_config, "store", "postgresql", &err);
    if (!err.empty()) {
      s.error = system_config_path + ": " + err + " (" + kPgForms + ")";
      return s;
    }
    if (v && pg) {
      s.error = system_config_path +
                ": [store] names both sqlite and postgresql; give one of them (sqlite = \"PATH\" for a file, "
                "postgresql = \"CONNINFO\" for a server)";
      return s;
    }
    if (pg) {
      std::string why;
      if (pg->empty()) {
        s.error = system_config_path + ": store.postgresql is empty (" + kPgForms + ")";
        return s;
      }
      if (!describe_conninfo(*pg, s.server, why)) {
        s.error = system_config_path + ": store.postgresql: " + why + " (" + kPgForms + ")";
        return s;
      }
      s.engine = "postgresql";
      s.path = *pg;
      s.source = system_config_path + " ([store] postgresql)";
      return s;
    }
    if (v) {
      if (v->empty()) {
        s.error = system_config_path + ": store.sqlite is empty (" + kSqliteForms + ")";
        return s;
      }
      const fs::path p(*v);
      if (!p.is_absolute() && data_root.empty()) {
        s.error = system_config_path + ": store.sqlite \"" + *v +
                  "\" is relative to the data root, and there is no data root";
        return s;
      }
      s.path = normal(p.is_absolute() ? p : fs::path(data_root) / p);
      s.source = system_config_path + " ([store] sqlite)";
      return s;
    }
  }
  if (data_root.empty()) {
    s.error = "no data root to hold store.sqlite: give --data-dir or --store";
    return s;
  }
  s.path = normal(fs::path(data_root) / kStoreFileName);
  s.source = "the data root's store.sqlite";
  s.data_root_default = true;
  return s;
}

StorePath find_store_path(const std::string& option, const std::string& data_root) {
  std::error_code ec;
  const fs::path cwd = fs::current_path(ec);
  std::optional<std::string> config;
  if (option.empty() && fs::exists(record::kSystemConfigPath, ec)) {
    std::ifstream f(record::kSystemConfigPath, std::ios::binary);
    if (!f) {
      StorePath s;
      s.error = std::string("cannot read ") + record::kSystemConfigPath;
      return s;
    }
    std::ostringstream ss;
    ss << f.rdbuf();
    config = ss.str();
  }
  return resolve_store_path(option, ec ? std::string() : cwd.string(), config, record::kSystemConfigPath,
                            data_root);
}

}  // namespace loadtrim::store
