// `loadtrim run`, `loadtrim resume`, `loadtrim verify`.
#include <cstdio>
#include <filesystem>
#include <iostream>

#include "app/exit_codes.hpp"
#include "app/pause_watch.hpp"
#include "app/session_runner.hpp"
#include "app/subcommands.hpp"
#include "record/data_root.hpp"
#include "record/event_log.hpp"
#include "record/verify.hpp"
#include "report/report.hpp"

namespace loadtrim::app {

namespace {
// The CSV exports for a spreadsheet set to a decimal comma, and in US units (report/report.hpp, CsvFormat).
void csv_options(CLI::App* sub, report::CsvFormat& f) {
  sub->add_flag(
      "--csv-decimal-comma", f.decimal_comma,
      "write the CSV exports for a spreadsheet set to a decimal comma: ';' between fields, ',' in numbers");
  sub->add_flag(
      "--csv-us", f.us_units,
      "write every CSV table in US units: A lbf, B lbf/mph, C lbf/mph², speeds in mph, forces in lbf");
}

void output_options(CLI::App* sub, RunRequest& r) {
  auto* q = sub->add_flag_function(
      "--quiet", [&r](std::int64_t) { r.console = session::Console::Mode::quiet; }, "print only the result");
  auto* j = sub->add_flag_function(
      "--json", [&r](std::int64_t) { r.console = session::Console::Mode::json; },
      "one JSON object per line on stdout");
  q->excludes(j);
  sub->add_flag("--unattended", r.unattended,
                "motor the rollers without asking (the lab's rules must allow unattended runs)");
  sub->add_flag("--live", r.live,
                "serve the read-only live status page while the session runs (docs/live.md; the address is "
                "printed)");
  sub->add_option(
         "--live-bind", r.live_bind,
         "where the live page listens, HOST:PORT (port 0: any free port); not a loopback address only "
         "with an access token in LOADTRIM_LIVE_TOKEN")
      ->capture_default_str();
  sub->add_option("--port", r.port, "override the cell file's TCP port")->check(CLI::Range(1, 65535));
  sub->add_option("--device", r.device, "override the cell file's serial device");
  sub->add_option("--rewarm-s", r.resume_warm_up_s,
                  "warm-up after a resume, a lost link or a pause (default: the profile's)")
      ->check(config::number_in(0.0, 14400.0, "s"));
  sub->add_option(
         "--units", r.units,
         "the console's units: metric, us (A, B, C in lbf, lbf/mph, lbf/mph²) or both (default: as the "
         "target was given; the record is always SI)")
      ->check(CLI::IsMember({"metric", "us", "both"}));
  sub->add_option(
         "--max-pause-s", r.max_pause_s,
         "how long a pause waits for its continue before the session ends as interrupted (resumable)")
      ->check(config::number_in(10.0, 86400.0, "s"))
      ->capture_default_str();
  sub->add_option(
      "--data-dir", r.data_dir,
      "the lab's data root: sessions, checks, histories, keys (default: $LOADTRIM_DATA_DIR, else data_dir in "
      "/etc/loadtrim/loadtrim.toml, else $XDG_DATA_HOME/loadtrim or ~/.local/share/loadtrim)");
  sub->add_option("--sessions", r.sessions_dir, "where session folders go (default: <data root>/sessions)");
  sub->add_option("--history", r.history_dir, "history of earlier sessions (default: <data root>/history)");
  sub->add_option("--checks", r.checks_dir, "the cells' dyno-check histories (default: <data root>/checks)");
  sub->add_option("--check-profile", r.check_profile,
                  "dyno check profile (default: config/checks/cfr1066.toml)");
  sub->add_option("--override-checks", r.override_checks,
                  "start although required dyno checks are due or failed; give the reason (it is logged)");
  csv_options(sub, r.csv);
  sub->add_option("--operator", r.operator_name,
                  "who runs it, for the record (default: the cell file's records.operator, else asked, else "
                  "the login name)");
}
}  // namespace

void register_session_commands(CLI::App& app, Runner& run) {
  auto req = std::make_shared<RunRequest>();
  auto* sub = app.add_subcommand("run", "run a setting session on the cell's dyno (motors the rollers)");
  sub->add_option("--cell", req->cell_file, "cell configuration (TOML)")->required();
  sub->add_option("--target", req->target_file, "vehicle target file (TOML)")->required();
  sub->add_option("--profile", req->profile, "standard profile name or file (default: the target's)");
  sub->add_option("--first-setting", req->first_setting, "standard, fleet, loss-map or history")
      ->check(CLI::IsMember({"standard", "fleet", "loss-map", "history"}))
      ->capture_default_str();
  sub->add_option("--fleet", req->fleet_csv, "EPA-format CSV for the fleet estimate (default: samples/data)");
  sub->add_option("--note", req->note, "operator note for the record");
  output_options(sub, *req);
  sub->callback([req, &run] { run = [req] { return run_new_session(*req); }; });

  auto rreq = std::make_shared<RunRequest>();
  auto folder = std::make_shared<std::string>();
  auto* res = app.add_subcommand("resume", "continue an interrupted session from its folder");
  res->add_option("folder", *folder, "the session folder")->required();
  output_options(res, *rreq);
  res->callback([rreq, folder, &run] { run = [rreq, folder] { return resume_session(*folder, *rreq); }; });

  // Pause and continue a running session from another terminal (pause_watch.hpp).
  for (const char* action : {"pause", "continue"}) {
    struct Req {
      std::string folder, by, why;
    };
    auto pr = std::make_shared<Req>();
    const bool pause = std::string(action) == "pause";
    auto* ps =
        app.add_subcommand(action, pause ? "pause the session running in a folder: a controlled stop to "
                                           "standstill, then it waits for `continue`"
                                         : "continue a paused session: it re-warms and goes on");
    ps->add_option("folder", pr->folder, "the running session's folder")->required();
    ps->add_option("--by", pr->by, "who asks, for the record")->required();
    auto* why = ps->add_option("--why", pr->why, pause ? "why, for the record" : "a note for the record");
    if (pause) why->required();
    ps->callback([pr, &run, a = std::string(action)] {
      run = [pr, a] { return send_pause_request(pr->folder, a, pr->by, pr->why); };
    });
  }

  auto rfolder = std::make_shared<std::string>();
  auto pdf = std::make_shared<bool>(false);
  auto* rep =
      app.add_subcommand("report", "write the HTML report and CSV exports of a session folder (and a PDF)");
  rep->add_option("folder", *rfolder, "the session folder")->required();
  rep->add_flag("--pdf", *pdf, "also print report.pdf with headless Chromium (Debian package chromium)");
  auto csv = std::make_shared<report::CsvFormat>();
  csv_options(rep, *csv);
  rep->callback([rfolder, pdf, csv, &run] {
    run = [rfolder, pdf, csv] {
      std::error_code ec;
      if (!std::filesystem::is_directory(*rfolder, ec)) {
        std::fprintf(stderr,
                     "loadtrim report: %s is not a session folder (no such folder): nothing written\n",
                     rfolder->c_str());
        return static_cast<int>(kBadInput);
      }
      const report::ReportFiles r = report::write_report(*rfolder, LOADTRIM_VERSION, *csv);
      if (r.not_a_session_folder) {
        std::fprintf(stderr, "loadtrim report: %s\n", r.error.c_str());
        return static_cast<int>(kBadInput);
      }
      if (!r.ok) {
        std::fprintf(stderr, "loadtrim: %s\n", r.error.c_str());
        return static_cast<int>(kRecordFailure);
      }
      std::printf("report: %s\ncsv: %s, %s\n", r.html.c_str(), r.coefficients_csv.c_str(),
                  r.deviations_csv.c_str());
      if (!r.chain_ok) std::printf("note: the log chain is broken; the report says so on its first page\n");
      if (*pdf) {
        std::string err;
        if (!report::print_pdf(*rfolder, err)) {
          std::fprintf(stderr, "loadtrim: %s\n", err.c_str());
          return static_cast<int>(kRecordFailure);
        }
        std::printf("pdf: %s/report.pdf\n", rfolder->c_str());
      }
      return static_cast<int>(kAccepted);
    };
  });

  struct VerifyArgs {
    std::string folder, data_dir, checks;
    std::vector<std::string> public_keys, reviewer_keys;
    bool json = false, no_cell_log = false;
  };
  auto va = std::make_shared<VerifyArgs>();
  auto* ver = app.add_subcommand(
      "verify",
      "verify a session or check folder: its log chain, every recorded file hash, the seal's coverage "
      "and signature, and each approval (docs/records.md). Exit codes: 0 verified; 5 broken "
      "(tampered or damaged: the record or file is named); 6 not finished (no seal); 7 sealed but "
      "unsigned, or signed with a key verify does not know; 2 no such folder or a bad option");
  ver->add_option("folder", va->folder, "the session or check folder")->required();
  ver->add_option(
      "--data-dir", va->data_dir,
      "the lab's data root: trusted public keys in keys/, cell logs in checks/ (default: --data-dir, else "
      "$LOADTRIM_DATA_DIR, else data_dir in /etc/loadtrim/loadtrim.toml, else $XDG_DATA_HOME/loadtrim or "
      "~/.local/share/loadtrim; now: " +
          record::find_data_root("").describe() + ")");
  ver->add_option("--public-key", va->public_keys,
                  "a trusted public key (PEM) for the seal, e.g. a retired cell key")
      ->check(CLI::ExistingFile);
  ver->add_option("--reviewer-key", va->reviewer_keys, "a trusted reviewer's public key (PEM) for approvals")
      ->check(CLI::ExistingFile);
  ver->add_option("--checks", va->checks, "where the cells' logs are (default: <data root>/checks)");
  ver->add_flag("--no-cell-log", va->no_cell_log, "do not compare the folder with its cell's log");
  ver->add_flag("--json", va->json, "print the verdict as one JSON object");
  ver->callback([va, &run] {
    run = [va] {
      std::error_code ec;
      if (!std::filesystem::is_directory(va->folder, ec)) {
        std::fprintf(stderr, "loadtrim verify: %s is not a folder\n", va->folder.c_str());
        return static_cast<int>(kBadInput);
      }
      record::VerifyOptions opt;
      std::vector<std::string> notes;
      const record::DataRoot root = record::find_data_root(va->data_dir);
      if (root.ok()) {
        opt.keys_dir = root.keys();
        opt.checks_root = root.checks();
      } else {
        notes.push_back("no data root (" + root.error + "): no trusted keys or cell log from it");
      }
      if (!va->checks.empty()) opt.checks_root = va->checks;
      if (va->no_cell_log) opt.checks_root.clear();
      for (const auto& [files, keys] :
           {std::pair{&va->public_keys, &opt.cell_keys}, std::pair{&va->reviewer_keys, &opt.reviewer_keys}})
        for (const auto& f : *files) {
          std::string err;
          auto k = record::PublicKey::load(f, err);
          if (!k) {
            std::fprintf(stderr, "loadtrim verify: %s\n", err.c_str());
            return static_cast<int>(kBadInput);
          }
          keys->push_back(*k);
        }
      const record::FolderVerdict v = record::verify_folder(va->folder, opt);
      if (va->json) {
        nlohmann::json j = v.to_json();
        for (const auto& n : notes) j["notes"].push_back(n);
        std::printf("%s\n", j.dump().c_str());
        return record::verify_exit_code(v.outcome);
      }
      for (const auto& n : notes) std::printf("note: %s\n", n.c_str());
      for (const auto& n : v.notes) std::printf("note: %s\n", n.c_str());
      switch (v.outcome) {
        case record::Outcome::verified:
          std::printf("verified: %s\n", v.message.c_str());
          break;
        case record::Outcome::broken:
          std::printf("BROKEN: %s\n", v.message.c_str());
          break;
        case record::Outcome::not_finished:
          std::printf("NOT FINISHED: %s\n", v.message.c_str());
          break;
        case record::Outcome::unsigned_seal:
          std::printf("SEALED, NOT SIGNED: %s\n", v.message.c_str());
          break;
        case record::Outcome::key_unknown:
          std::printf("KEY UNKNOWN: %s\n", v.message.c_str());
          break;
      }
      for (const auto& f : v.findings) std::printf("finding: %s\n", f.c_str());
      if (v.outcome == record::Outcome::broken) {
        if (v.record >= 0) std::printf("first broken record: %lld\n", static_cast<long long>(v.record));
        if (!v.file.empty()) std::printf("file: %s\n", v.file.c_str());
      }
      if (v.seal)
        std::printf("seal: record %llu, %s, %zu files, %s\n", static_cast<unsigned long long>(v.seal->seq),
                    v.seal->utc.c_str(), v.seal->files,
                    v.seal->is_signed
                        ? ("signer " + v.seal->signer +
                           (v.seal->signature_checked ? " (signature verified)" : " (not checked)"))
                              .c_str()
                        : "unsigned");
      for (const auto& a : v.approvals)
        std::printf("approval: record %llu, %s, %s: \"%s\" (%s)\n", static_cast<unsigned long long>(a.seq),
                    a.reviewer.c_str(), a.utc.c_str(), a.statement.c_str(),
                    a.signature_checked ? "signature verified" : "reviewer key unknown");
      return record::verify_exit_code(v.outcome);
    };
  });
}

}  // namespace loadtrim::app
