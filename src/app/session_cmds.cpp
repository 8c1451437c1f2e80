// `loadtrim run`, `loadtrim resume`, `loadtrim verify`.
#include <cstdio>
#include <iostream>

#include "app/exit_codes.hpp"
#include "app/session_runner.hpp"
#include "app/subcommands.hpp"
#include "record/event_log.hpp"
#include "report/report.hpp"

namespace loadtrim::app {

namespace {
void output_options(CLI::App* sub, RunRequest& r) {
  auto* q = sub->add_flag_function("--quiet", [&r](std::int64_t) { r.console = session::Console::Mode::quiet; }, "print only the result");
  auto* j = sub->add_flag_function("--json", [&r](std::int64_t) { r.console = session::Console::Mode::json; }, "one JSON object per line on stdout");
  q->excludes(j);
  sub->add_flag("--unattended", r.unattended, "motor the rollers without asking (the lab's rules must allow unattended runs)");
  sub->add_option("--port", r.port, "override the cell file's TCP port")->check(CLI::Range(1, 65535));
  sub->add_option("--device", r.device, "override the cell file's serial device");
  sub->add_option("--rewarm-s", r.resume_warm_up_s, "warm-up after a resume or a lost link (default: the profile's)")->check(CLI::Range(0.0, 14400.0));
  sub->add_option("--sessions", r.sessions_dir, "where session folders go")->capture_default_str();
  sub->add_option("--history", r.history_dir, "history of earlier sessions (default: <sessions>/history)");
}
}  // namespace

void register_session_commands(CLI::App& app, Runner& run) {
  auto req = std::make_shared<RunRequest>();
  auto* sub = app.add_subcommand("run", "run a setting session on the cell's dyno (motors the rollers)");
  sub->add_option("--cell", req->cell_file, "cell configuration (TOML)")->required();
  sub->add_option("--target", req->target_file, "vehicle target file (TOML)")->required();
  sub->add_option("--profile", req->profile, "standard profile name or file (default: the target's)");
  sub->add_option("--first-setting", req->first_setting, "standard, fleet, loss-map or history")
      ->check(CLI::IsMember({"standard", "fleet", "loss-map", "history"}))->capture_default_str();
  sub->add_option("--fleet", req->fleet_csv, "EPA-format CSV for the fleet estimate (default: samples/data)");
  sub->add_option("--note", req->note, "operator note for the record");
  sub->add_option("--checks", req->checks_dir, "the cells' dyno-check histories (loadtrim check)")->capture_default_str();
  sub->add_option("--check-profile", req->check_profile, "dyno check profile (default: config/checks/cfr1066.toml)");
  sub->add_option("--override-checks", req->override_checks,
                  "start although required dyno checks are due or failed; give the reason (it is logged)");
  output_options(sub, *req);
  sub->callback([req, &run] { run = [req] { return run_new_session(*req); }; });

  auto rreq = std::make_shared<RunRequest>();
  auto folder = std::make_shared<std::string>();
  auto* res = app.add_subcommand("resume", "continue an interrupted session from its folder");
  res->add_option("folder", *folder, "the session folder")->required();
  output_options(res, *rreq);
  res->callback([rreq, folder, &run] { run = [rreq, folder] { return resume_session(*folder, *rreq); }; });

  auto rfolder = std::make_shared<std::string>();
  auto pdf = std::make_shared<bool>(false);
  auto* rep = app.add_subcommand("report", "write the HTML report and CSV exports of a session folder (and a PDF)");
  rep->add_option("folder", *rfolder, "the session folder")->required();
  rep->add_flag("--pdf", *pdf, "also print report.pdf with headless Chromium (Debian package chromium)");
  rep->callback([rfolder, pdf, &run] {
    run = [rfolder, pdf] {
      const report::ReportFiles r = report::write_report(*rfolder, LOADTRIM_VERSION);
      if (!r.ok) {
        std::fprintf(stderr, "loadtrim: %s\n", r.error.c_str());
        return static_cast<int>(kRecordFailure);
      }
      std::printf("report: %s\ncsv: %s, %s\n", r.html.c_str(), r.coefficients_csv.c_str(), r.deviations_csv.c_str());
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

  auto vfolder = std::make_shared<std::string>();
  auto* ver = app.add_subcommand("verify", "verify a session folder's log chain and recorded file hashes");
  ver->add_option("folder", *vfolder, "the session folder")->required();
  ver->callback([vfolder, &run] {
    run = [vfolder] {
      const record::VerifyResult v = record::verify_session_folder(*vfolder);
      for (const auto& n : v.notes) std::printf("note: %s\n", n.c_str());
      if (v.ok) {
        std::printf("verified: %s\n", v.message.c_str());
        return static_cast<int>(kAccepted);
      }
      std::printf("BROKEN: %s\n", v.message.c_str());
      if (v.first_bad_record >= 0) std::printf("first broken record: %lld\n", static_cast<long long>(v.first_bad_record));
      return static_cast<int>(kRecordFailure);
    };
  });
}

}  // namespace loadtrim::app
