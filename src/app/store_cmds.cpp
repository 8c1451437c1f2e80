// `loadtrim store migrate | import FOLDER... | check` and `loadtrim history`: the lab's record store
// (docs/store.md). Thin: src/store opens the store, reads and verifies the folders and answers the questions;
// the exit codes are here, with the other commands' (README, "Exit codes").
#include <algorithm>
#include <chrono>
#include <cstdio>
#include <filesystem>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <thread>
#include <vector>

#include "app/exit_codes.hpp"
#include "app/live_page.hpp"
#include "app/overview.hpp"
#include "app/session_runner.hpp"
#include "app/store_bench.hpp"
#include "app/store_hook.hpp"
#include "app/subcommands.hpp"
#include "record/data_root.hpp"
#include "record/session_folder.hpp"
#include "record/verify.hpp"
#include "store/index.hpp"
#include "store/pg_store.hpp"
#include "store/queue.hpp"
#include "store/sqlite_store.hpp"

namespace loadtrim::app {

namespace {

// How long `store import --queued` may index before leaving the rest for another run (common practice, no
// source: minutes, for a queue of a day's sessions).
constexpr double kQueuedBudgetS = 600.0;

struct StoreArgs {
  std::string data_dir, store, checks;
  std::vector<std::string> public_keys;
  std::vector<std::string> folders;
  std::string vehicle, cell, since;
  bool csv = false, json = false, queued = false;
  // overview
  std::string format, bind = "127.0.0.1:0";
  int refresh_s = 10;
  double stale_after_h = kDefaultStaleAfterS / 3600.0;
};

// Where the lab's data and the store are. False (with the message printed) when they cannot be resolved.
bool locate(const char* cmd, const StoreArgs& a, record::DataRoot& root, store::StorePath& where) {
  root = record::find_data_root(a.data_dir);
  where = store::find_store_path(a.store, root.ok() ? root.path : std::string());
  // A store given by --store or by the lab's [store] table (a server, an absolute file) needs no data root;
  // the default file does.
  if (!where.ok()) {
    std::fprintf(stderr, "loadtrim %s: %s\n", cmd, where.error.c_str());
    if (!root.ok()) std::fprintf(stderr, "loadtrim %s: %s\n", cmd, root.describe().c_str());
    std::fprintf(stderr, "refused: nothing was changed.\n");
    return false;
  }
  return true;
}

// What verify trusts when the store verifies a folder: as `loadtrim verify` (the data root's keys/ and
// checks/, --checks, --public-key). False (printed) when a key cannot be read.
bool verify_options(const char* cmd, const StoreArgs& a, const record::DataRoot& root,
                    record::VerifyOptions& opt) {
  if (root.ok()) {
    opt.keys_dir = root.keys();
    opt.checks_root = root.checks();
  }
  if (!a.checks.empty()) opt.checks_root = a.checks;
  for (const auto& f : a.public_keys) {
    std::string err;
    auto k = record::PublicKey::load(f, err);
    if (!k) {
      std::fprintf(stderr, "loadtrim %s: --public-key: %s\n", cmd, err.c_str());
      return false;
    }
    opt.cell_keys.push_back(*k);
  }
  return true;
}

std::unique_ptr<store::Store> open_store(const char* cmd, const store::StorePath& where,
                                         store::OpenMode mode) {
  std::string err;
  auto s = where.engine == "postgresql" ? store::open_postgresql(where.path, mode, err)
                                        : store::open_sqlite(where.path, mode, err);
  if (!s)
    std::fprintf(stderr, "loadtrim %s: %s\nstore: %s (from %s)\n", cmd, err.c_str(), where.shown().c_str(),
                 where.source.c_str());
  return s;
}

int migrate(const StoreArgs& a) {
  record::DataRoot root;
  store::StorePath where;
  if (!locate("store migrate", a, root, where)) return kBadInput;
  std::error_code ec;
  if (where.engine == "sqlite")
    std::filesystem::create_directories(std::filesystem::path(where.path).parent_path(), ec);
  if (ec) {
    std::fprintf(stderr, "loadtrim store migrate: cannot create the folder of %s: %s\n", where.path.c_str(),
                 ec.message().c_str());
    return kBadInput;
  }
  auto s = open_store("store migrate", where, store::OpenMode::migrate);
  if (!s) return kBadInput;
  std::printf("store: %s (from %s), engine %s\n", s->location().c_str(), where.source.c_str(),
              s->engine().c_str());
  std::string err;
  std::vector<std::string> applied;
  const bool ok = s->migrate(err, &applied);
  for (const auto& step : applied) std::printf("applied migration %s\n", step.c_str());
  if (!ok) {
    std::fprintf(stderr, "loadtrim store migrate: %s\n", err.c_str());
    return kRecordFailure;
  }
  const int v = s->schema_version(err);
  std::printf("schema version %d (this loadtrim needs %d)%s\n", v, store::known_schema_version(),
              applied.empty() ? ": already current, nothing to do" : "");
  return kAccepted;
}

int import_folders(const StoreArgs& a) {
  record::DataRoot root;
  store::StorePath where;
  if (!locate("store import", a, root, where)) return kBadInput;
  if (a.folders.empty() && !a.queued) {
    std::fprintf(
        stderr,
        "loadtrim store import: give the folders to index, or --queued\nrefused: nothing was changed.\n");
    return kBadInput;
  }
  if (a.queued) {
    // The folders whose end found the store unavailable (docs/store.md "Indexed when it ends").
    if (store::queued_entries(root.path).empty()) {
      std::printf("nothing queued in %s\n", root.queue().c_str());
    } else {
      // -1 the store unusable, -2 a queued folder set aside (it does not verify or is gone): both exit 5.
      const int left = drain_store_queue(root, where, kQueuedBudgetS, true);
      if (left != 0) return left < 0 ? kRecordFailure : kInterrupted;
      std::printf("the queue in %s is empty\n", root.queue().c_str());
    }
    if (a.folders.empty()) return kAccepted;
  }
  record::VerifyOptions opt;
  if (!verify_options("store import", a, root, opt)) return kBadInput;
  auto s = open_store("store import", where, store::OpenMode::use);
  if (!s) return kBadInput;
  int worst = kAccepted;
  int indexed = 0, refreshed = 0, refused = 0;
  for (const auto& folder : a.folders) {
    const store::IngestResult r = store::ingest_folder(*s, folder, opt);
    const int code = r.exit_code();
    if (code == 0) {
      std::printf("%s\n", r.message.c_str());
      (r.status == store::IngestStatus::indexed ? indexed : refreshed) += 1;
    } else {
      std::fprintf(stderr, "loadtrim store import: %s\n", r.message.c_str());
      ++refused;
    }
    // Broken or a store failure (5) outranks a refusal (2).
    if (code == kRecordFailure || (code == kBadInput && worst == kAccepted)) worst = code;
  }
  std::printf("%d indexed, %d already indexed, %d refused; store %s\n", indexed, refreshed, refused,
              s->location().c_str());
  return worst;
}

int check_rows(const StoreArgs& a) {
  record::DataRoot root;
  store::StorePath where;
  if (!locate("store check", a, root, where)) return kBadInput;
  record::VerifyOptions opt;
  if (!verify_options("store check", a, root, opt)) return kBadInput;
  auto s = open_store("store check", where, store::OpenMode::use);
  if (!s) return kBadInput;
  std::vector<store::CheckFinding> findings;
  std::size_t rows = 0;
  std::string err;
  if (!store::check_store(*s, opt, findings, rows, err)) {
    std::fprintf(stderr, "loadtrim store check: %s\n", err.c_str());
    return kRecordFailure;
  }
  for (const auto& f : findings) std::printf("%s: %s\n", f.problem.c_str(), f.message.c_str());
  std::printf("checked %zu row(s) against their folders: %zu finding(s); store %s\n", rows, findings.size(),
              s->location().c_str());
  return findings.empty() ? kAccepted : kRecordFailure;
}

// RFC 4180 §2: a field with a comma, a double quote or a line break is enclosed in double quotes, and a
// double quote inside it is doubled.
std::string csv_field(const std::string& v) {
  if (v.find_first_of(",\"\r\n") == std::string::npos) return v;
  std::string out = "\"";
  for (char c : v) {
    if (c == '"') out += '"';
    out += c;
  }
  return out + "\"";
}

std::string number(const std::optional<double>& v) {
  return v ? nlohmann::json(*v).dump() : std::string();
}

std::string fixed(double v, int decimals) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

int history(const StoreArgs& a) {
  if (!a.since.empty() && !store::is_iso_date(a.since)) {
    std::fprintf(
        stderr,
        "loadtrim history: --since \"%s\" is not a date; allowed: YYYY-MM-DD, a calendar date (UTC)\n"
        "refused: nothing was read.\n",
        a.since.c_str());
    return kBadInput;
  }
  record::DataRoot root;
  store::StorePath where;
  if (!locate("history", a, root, where)) return kBadInput;
  auto s = open_store("history", where, store::OpenMode::use);
  if (!s) return kBadInput;
  std::vector<store::HistoryRow> rows;
  std::string err;
  if (!s->history({a.vehicle, a.cell, a.since}, rows, err)) {
    std::fprintf(stderr, "loadtrim history: %s\n", err.c_str());
    return kRecordFailure;
  }
  if (a.json) {
    nlohmann::json out = {{"store", s->location()},
                          {"engine", s->engine()},
                          {"query", {{"vehicle", a.vehicle}, {"cell", a.cell}, {"since", a.since}}},
                          {"rows", nlohmann::json::array()}};
    for (const auto& r : rows) {
      nlohmann::json j = {{"what", r.what},
                          {"kind", r.kind},
                          {"utc", r.utc},
                          {"cell", r.cell},
                          {"vehicle", r.vehicle},
                          {"operator", r.operator_name},
                          {"result", r.result},
                          {"accepted", r.accepted},
                          {"detail", r.detail},
                          {"coastdowns", r.coastdowns},
                          {"reviewers", r.reviewer},
                          {"verify_outcome", r.verify_outcome},
                          {"folder", r.folder}};
      j["final_set"] = r.final_set ? nlohmann::json{{"f0_n", r.final_set->f0_n},
                                                    {"f1_n_per_kmh", r.final_set->f1_n_per_kmh},
                                                    {"f2_n_per_kmh2", r.final_set->f2_n_per_kmh2}}
                                   : nlohmann::json();
      j["cell_time_s"] = r.cell_time_s ? nlohmann::json(*r.cell_time_s) : nlohmann::json();
      out["rows"].push_back(std::move(j));
    }
    std::printf("%s\n", out.dump().c_str());
    return kAccepted;
  }
  if (a.csv) {
    std::printf(
        "utc,what,kind,cell,vehicle,operator,result,accepted,detail,final_f0_n,final_f1_n_per_kmh,"
        "final_f2_n_per_kmh2,coastdowns,cell_time_s,reviewers,verify_outcome,folder\r\n");
    for (const auto& r : rows) {
      const std::vector<std::string> f = {
          r.utc,
          r.what,
          r.kind,
          r.cell,
          r.vehicle,
          r.operator_name,
          r.result,
          r.accepted ? "true" : "false",
          r.detail,
          number(r.final_set ? std::optional<double>(r.final_set->f0_n) : std::nullopt),
          number(r.final_set ? std::optional<double>(r.final_set->f1_n_per_kmh) : std::nullopt),
          number(r.final_set ? std::optional<double>(r.final_set->f2_n_per_kmh2) : std::nullopt),
          r.what == "session" ? std::to_string(r.coastdowns) : std::string(),
          number(r.cell_time_s),
          r.reviewer,
          r.verify_outcome,
          r.folder};
      std::string line;
      for (std::size_t i = 0; i < f.size(); ++i) line += (i ? "," : "") + csv_field(f[i]);
      std::printf("%s\r\n", line.c_str());
    }
    return kAccepted;
  }
  std::printf("store: %s (from %s)\n", s->location().c_str(), where.source.c_str());
  if (rows.empty()) {
    std::printf("no session or dyno check matches\n");
    return kAccepted;
  }
  std::printf("%-16s  %-20s  %-30s  %-14s  %-14s  %-40s  %-3s  %s\n", "started (UTC)", "what", "cell",
              "vehicle", "result", "final set F0 N, F1 N/(km/h), F2 N/(km/h)^2", "cd", "seal");
  for (const auto& r : rows) {
    std::string when = r.utc.substr(0, 16);
    std::replace(when.begin(), when.end(), 'T', ' ');
    const std::string what = r.what == "check" ? "check " + r.kind : "session " + r.kind;
    const std::string set = r.final_set
                                ? fixed(r.final_set->f0_n, 2) + ", " + fixed(r.final_set->f1_n_per_kmh, 4) +
                                      ", " + fixed(r.final_set->f2_n_per_kmh2, 5)
                                : std::string("-");
    std::printf("%-16s  %-20s  %-30s  %-14s  %-14s  %-40s  %-3s  %s\n", when.c_str(), what.c_str(),
                r.cell.c_str(), r.vehicle.empty() ? "-" : r.vehicle.c_str(), r.result.c_str(), set.c_str(),
                r.what == "session" ? std::to_string(r.coastdowns).c_str() : "-", r.verify_outcome.c_str());
    std::printf("    %s%s\n", r.folder.c_str(),
                r.reviewer.empty() ? "" : ("  approved by " + r.reviewer).c_str());
  }
  std::printf("%zu row(s)\n", rows.size());
  return kAccepted;
}

void common_options(CLI::App* sub, StoreArgs& a) {
  sub->add_option("--data-dir", a.data_dir,
                  "the lab's data root (default: as `loadtrim verify`; now: " +
                      record::find_data_root("").describe() + ")");
  sub->add_option(
      "--store", a.store,
      "the store: an SQLite file, or a PostgreSQL server as a libpq URI postgresql://[user@]host[:port]/"
      "dbname (default: [store] postgresql or sqlite in /etc/loadtrim/loadtrim.toml, else "
      "<data root>/store.sqlite)");
}

void verify_options_cli(CLI::App* sub, StoreArgs& a) {
  sub->add_option("--checks", a.checks, "where the cells' logs are (default: <data root>/checks)");
  sub->add_option("--public-key", a.public_keys,
                  "a trusted public key (PEM) for the seals, e.g. a retired cell key")
      ->check(CLI::ExistingFile);
}

// --- `loadtrim overview` (docs/live.md "The lab overview") ---
// The view read now; false with the store's sentence.
bool read_overview(store::Store& s, const StoreArgs& a, OverviewView& v, std::string& err) {
  v.store = s.location();
  v.engine = s.engine();
  v.now_utc = record::utc_now();
  v.stale_after_s = a.stale_after_h * 3600.0;
  return s.overview(v.cells, err);
}

int overview(const StoreArgs& a) {
  if (!a.format.empty() && a.format != "text" && a.format != "json" && a.format != "html") {
    std::fprintf(stderr,
                 "loadtrim overview: --format \"%s\": allowed: text, json or html (without --format the "
                 "page is served)\nrefused: nothing was read.\n",
                 a.format.c_str());
    return kBadInput;
  }
  if (a.format.empty() && !live_bind_usable(a.bind)) return kBadInput;
  record::DataRoot root;
  store::StorePath where;
  if (!locate("overview", a, root, where)) return kBadInput;
  // The store missing or down is a failure to read the record (exit 5), not a bad option.
  auto s = open_store("overview", where, store::OpenMode::use);
  if (!s) return kRecordFailure;
  OverviewView v;
  std::string err;
  if (!read_overview(*s, a, v, err)) {
    std::fprintf(stderr, "loadtrim overview: the store could not be read: %s\n", err.c_str());
    return kRecordFailure;
  }
  if (a.format == "json") {
    std::printf("%s\n",
                overview_json(v).dump(-1, ' ', false, nlohmann::json::error_handler_t::replace).c_str());
    return kAccepted;
  }
  if (a.format == "text") {
    std::printf("%s", overview_text(v).c_str());
    return kAccepted;
  }
  if (a.format == "html") {
    std::printf("%s", overview_html(v, 0).c_str());
    return kAccepted;
  }
  // Served until Ctrl-C: each request reads the store again (opened anew, so a store that went down and came
  // back is read again); one that cannot be read answers 503 with the sentence.
  const int refresh = a.refresh_s;
  const OverviewServer::Page page = [&where, &a, refresh](bool json) -> std::pair<int, std::string> {
    std::string e;
    auto st = where.engine == "postgresql" ? store::open_postgresql(where.path, store::OpenMode::use, e)
                                           : store::open_sqlite(where.path, store::OpenMode::use, e);
    OverviewView view;
    if (!st || !read_overview(*st, a, view, e)) {
      const std::string sentence = "the store could not be read: " + e;
      if (json) return {503, nlohmann::json({{"error", sentence}}).dump()};
      return {503, overview_error_html(sentence, refresh)};
    }
    if (json)
      return {200, overview_json(view).dump(-1, ' ', false, nlohmann::json::error_handler_t::replace)};
    return {200, overview_html(view, refresh)};
  };
  install_stop_handlers();
  auto server = OverviewServer::start(live_options_for(a.bind), page, err);
  if (!server) {
    std::fprintf(stderr, "loadtrim overview: %s\n", err.c_str());
    return kBadInput;
  }
  s.reset();
  std::printf("lab overview: %s (read-only; from %s; Ctrl-C ends it)\n", server->url().c_str(),
              where.shown().c_str());
  std::fflush(stdout);
  while (!stop_flag().load()) std::this_thread::sleep_for(std::chrono::milliseconds(100));
  std::printf("lab overview: stopped\n");
  return kAccepted;
}

}  // namespace

void register_store_commands(CLI::App& app, Runner& run) {
  auto a = std::make_shared<StoreArgs>();
  auto* sub = app.add_subcommand(
      "store", "the lab's record store, an index of sealed session and dyno-check folders (docs/store.md)");
  sub->require_subcommand(1);
  auto* mig =
      sub->add_subcommand("migrate",
                          "create the store, or bring its schema to this loadtrim's version (the only "
                          "command that changes the schema)");
  common_options(mig, *a);
  mig->callback([a, &run] { run = [a] { return migrate(*a); }; });
  auto* imp = sub->add_subcommand(
      "import",
      "index sealed folders: each is verified first; a broken one is refused (exit 5), an unfinished one too "
      "(exit 2)");
  imp->add_option("folders", a->folders, "session or dyno-check folders");
  imp->add_flag("--queued", a->queued,
                "first index the folders queued in <data root>/queue/ when their end found the store "
                "unavailable (those that do not verify are set aside in queue/refused/)");
  common_options(imp, *a);
  verify_options_cli(imp, *a);
  imp->callback([a, &run] { run = [a] { return import_folders(*a); }; });
  auto* chk = sub->add_subcommand(
      "check",
      "every row against its folder: missing, no longer verifying or another seal is a finding (exit 5)");
  common_options(chk, *a);
  verify_options_cli(chk, *a);
  chk->callback([a, &run] { run = [a] { return check_rows(*a); }; });

  auto bench = std::make_shared<StoreBenchArgs>();
  auto* ben = sub->add_subcommand("bench",
                                  "the store's speed at a lab's scale: a scratch store filled with invented "
                                  "sessions, `history` timed against "
                                  "a store without its history indexes (docs/performance.md)");
  ben->add_option("--sessions", bench->sessions, "how many invented sessions")
      ->check(CLI::Range(100, 1000000))
      ->capture_default_str();
  ben->add_option("--postgresql", bench->postgresql,
                  "also run it on this PostgreSQL server (a libpq connection string), in two scratch schemas "
                  "it creates and drops (loadtrim_bench_*); nothing else there is touched");
  ben->callback([bench, &run] { run = [bench] { return store_bench(*bench); }; });

  auto* his =
      app.add_subcommand("history",
                         "the sessions and dyno checks the store holds, newest first, with their result "
                         "and final setting");
  his->add_option("--vehicle", a->vehicle, "only this vehicle's sessions (checks have no vehicle)");
  his->add_option("--cell", a->cell, "only this cell's sessions and checks (its name, as in its cell file)");
  his->add_option("--since", a->since, "only what started on or after this date, YYYY-MM-DD (UTC)");
  auto* csv = his->add_flag("--csv", a->csv, "comma-separated values (RFC 4180), one row per line");
  his->add_flag("--json", a->json, "one JSON object with the rows")->excludes(csv);
  common_options(his, *a);
  his->callback([a, &run] { run = [a] { return history(*a); }; });

  auto* ovw = app.add_subcommand("overview",
                                 "every cell's current or last session and dyno check from the store: a "
                                 "read-only page, refreshing itself "
                                 "(or printed once with --format)");
  ovw->add_option("--format", a->format, "print it once instead of serving the page: text, json or html");
  ovw->add_option(
         "--bind", a->bind,
         "where the page listens, HOST:PORT (port 0: any free port); not a loopback address only with "
         "an access token in LOADTRIM_LIVE_TOKEN")
      ->capture_default_str();
  ovw->add_option("--refresh", a->refresh_s, "the page reloads itself every this many seconds")
      ->check(CLI::Range(2, 3600))
      ->capture_default_str();
  ovw->add_option("--stale-after-h", a->stale_after_h,
                  "a running entry older than this many hours is shown as \"no end indexed (stale?)\"")
      ->check(config::number_in(0.1, 720.0, "h"))
      ->capture_default_str();
  common_options(ovw, *a);
  ovw->callback([a, &run] { run = [a] { return overview(*a); }; });
}

}  // namespace loadtrim::app
