// `loadtrim approve FOLDER --reviewer NAME --key REVIEWER_KEY --statement TEXT`: a reviewer's signed sign-off
// of a sealed folder. Only a folder that verifies (the cell's seal checked against a trusted key) is
// approved; the approval names the seal it approves and is verified by `loadtrim verify`. Thin:
// record/seal.hpp writes it.
#include <chrono>
#include <cstdio>
#include <filesystem>
#include <memory>
#include <optional>
#include <string>
#include <thread>

#include "app/cell_locks.hpp"
#include "app/exit_codes.hpp"
#include "app/subcommands.hpp"
#include "record/data_root.hpp"
#include "record/seal.hpp"
#include "record/verify.hpp"

namespace loadtrim::app {

namespace {

// How long a second `approve` of one folder waits for the first to finish before it is refused (an approval
// verifies the folder, signs and appends one record: well under a second for a session folder; the project's
// own choice, docs/records.md "Approvals").
constexpr auto kApproveLockWait = std::chrono::seconds(10);
constexpr auto kApproveLockPoll = std::chrono::milliseconds(100);

struct ApproveArgs {
  std::string folder, reviewer, key, statement, data_dir, checks;
  std::vector<std::string> public_keys;
};

int approve(const ApproveArgs& a) {
  std::error_code ec;
  if (!std::filesystem::is_directory(a.folder, ec)) {
    std::fprintf(stderr, "loadtrim approve: %s is not a folder\n", a.folder.c_str());
    return kBadInput;
  }
  std::string err;
  const auto key = record::SigningKey::load(a.key, err);
  if (!key) {
    std::fprintf(stderr, "loadtrim approve: %s\n", err.c_str());
    return kBadInput;
  }
  record::VerifyOptions opt;
  const record::DataRoot root = record::find_data_root(a.data_dir);
  if (root.ok()) {
    opt.keys_dir = root.keys();
    opt.checks_root = root.checks();
  }
  if (!a.checks.empty()) opt.checks_root = a.checks;
  for (const auto& f : a.public_keys) {
    auto k = record::PublicKey::load(f, err);
    if (!k) {
      std::fprintf(stderr, "loadtrim approve: %s\n", err.c_str());
      return kBadInput;
    }
    opt.cell_keys.push_back(*k);
  }
  // The reviewer's registered key, when there is one, must be the key signing now.
  if (!opt.keys_dir.empty()) {
    const std::string registered =
        (std::filesystem::path(opt.keys_dir) / (record::reviewer_key_stem(a.reviewer) + ".pub.pem")).string();
    if (std::filesystem::exists(registered, ec)) {
      const auto pk = record::PublicKey::load(registered, err);
      if (pk && pk->fingerprint() != key->fingerprint()) {
        std::fprintf(stderr, "loadtrim approve: %s is not %s's registered key (%s is %s)\n", a.key.c_str(),
                     a.reviewer.c_str(), registered.c_str(), pk->fingerprint().c_str());
        return kBadInput;
      }
    } else {
      std::printf(
          "note: %s is not in the data root; verify reports this approval as \"key unknown\" until it is\n",
          registered.c_str());
    }
  }
  // The folder's lock (the one run and resume hold: docs/safety.md §7), held across the verify, the read of
  // the log and the append, so that two approvals never both append after the same record. A second approver
  // waits for it up to kApproveLockWait, then is refused naming the holder.
  std::optional<record::FileLock> folder_lock;
  std::string lock_msg;
  const auto give_up = std::chrono::steady_clock::now() + kApproveLockWait;
  while (!lock_folder(a.folder, "approve", folder_lock, lock_msg)) {
    const bool busy = lock_msg.rfind("folder busy", 0) == 0;
    if (!busy || std::chrono::steady_clock::now() >= give_up) {
      const std::string waited =
          busy ? " (waited " + std::to_string(kApproveLockWait.count()) + " s for it); nothing was written"
               : "";
      std::fprintf(stderr, "loadtrim approve: refusing to approve %s: %s%s\n", a.folder.c_str(),
                   lock_msg.c_str(), waited.c_str());
      return kBadInput;
    }
    std::this_thread::sleep_for(kApproveLockPoll);
  }
  if (!lock_msg.empty()) std::printf("note: %s\n", lock_msg.c_str());  // a stale lock taken over
  // Approve only what verifies: approvals may follow the seal, so whether other approvals are already there
  // does not matter, but an unknown reviewer key among them does not stop a new approval.
  const record::FolderVerdict v = record::verify_folder(a.folder, opt);
  const bool seal_ok = v.seal && v.seal->signature_checked && v.outcome != record::Outcome::broken;
  if (!seal_ok) {
    std::fprintf(stderr, "loadtrim approve: refusing to approve %s: %s: %s\n", a.folder.c_str(),
                 record::to_string(v.outcome), v.message.c_str());
    return v.outcome == record::Outcome::verified ? kRecordFailure : record::verify_exit_code(v.outcome);
  }
  record::ApprovalInfo info;
  if (!record::approve_folder(a.folder, {a.reviewer, a.statement, &*key, ""}, &info, err)) {
    std::fprintf(stderr, "loadtrim approve: %s\n", err.c_str());
    return kRecordFailure;
  }
  std::printf("approved: record %llu by %s (key %s), approving the seal %s\n",
              static_cast<unsigned long long>(info.seq), a.reviewer.c_str(), info.signer.c_str(),
              info.seal_sha256.c_str());
  return kAccepted;
}

}  // namespace

void register_approve_command(CLI::App& app, Runner& run) {
  auto a = std::make_shared<ApproveArgs>();
  auto* sub =
      app.add_subcommand("approve", "record a reviewer's signed approval of a sealed, verified folder");
  sub->add_option("folder", a->folder, "the session or check folder")->required();
  sub->add_option("--reviewer", a->reviewer, "the reviewer's name")->required();
  sub->add_option("--key", a->key,
                  "the reviewer's private key (PEM, mode 0600; loadtrim keys create --reviewer NAME)")
      ->required();
  sub->add_option("--statement", a->statement,
                  "what the reviewer states, e.g. \"reviewed; setting fit for use\"")
      ->required();
  sub->add_option("--data-dir", a->data_dir,
                  "the lab's data root (now: " + record::find_data_root("").describe() + ")");
  sub->add_option("--public-key", a->public_keys, "a trusted public key (PEM) for the cell's seal")
      ->check(CLI::ExistingFile);
  sub->add_option("--checks", a->checks, "where the cells' logs are (default: <data root>/checks)");
  sub->callback([a, &run] { run = [a] { return approve(*a); }; });
}

}  // namespace loadtrim::app
