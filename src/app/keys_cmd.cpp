// `loadtrim keys create --cell NAME | --reviewer NAME [--out DIR]`: a new Ed25519 key pair for a cell (its
// sessions' and checks' seals) or a reviewer (approvals), in the data root's keys/ by default; `loadtrim keys
// fingerprint PEM`. Thin: record/seal.hpp creates the files (private key 0600, created with O_EXCL, never
// overwritten).
#include <sys/stat.h>

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <memory>

#include "app/exit_codes.hpp"
#include "app/subcommands.hpp"
#include "record/data_root.hpp"
#include "record/seal.hpp"

namespace loadtrim::app {

namespace {

struct KeysArgs {
  std::string cell, reviewer, out, data_dir, pem;
};

int create(const KeysArgs& a) {
  if (a.cell.empty() == a.reviewer.empty()) {
    std::fprintf(stderr, "loadtrim keys create: give exactly one of --cell NAME or --reviewer NAME\n");
    return kBadInput;
  }
  std::string dir = a.out;
  if (dir.empty()) {
    const record::DataRoot root = record::find_data_root(a.data_dir);
    std::string err;
    std::vector<std::string> notes;
    if (!record::ensure_data_root(root, err, &notes)) {
      std::fprintf(stderr, "loadtrim keys create: %s\n", err.c_str());
      return kBadInput;
    }
    for (const auto& n : notes) std::printf("note: %s\n", n.c_str());
    std::printf("data root: %s\n", root.describe().c_str());
    dir = root.keys();
  } else if (::mkdir(dir.c_str(), 0700) != 0 && errno != EEXIST) {
    std::fprintf(stderr, "loadtrim keys create: cannot create %s: %s\n", dir.c_str(), std::strerror(errno));
    return kBadInput;
  }
  const std::string stem =
      a.cell.empty() ? record::reviewer_key_stem(a.reviewer) : record::cell_key_stem(a.cell);
  const std::string priv = (std::filesystem::path(dir) / (stem + ".key.pem")).string();
  const std::string pub = (std::filesystem::path(dir) / (stem + ".pub.pem")).string();
  record::KeyPairFiles files;
  std::string err;
  if (!record::create_key_pair(priv, pub, &files, err)) {
    std::fprintf(stderr, "loadtrim keys create: %s\n", err.c_str());
    return kBadInput;
  }
  std::printf(
      "private key: %s (mode 0600: keep it where only %s can read it; never copy it into a session folder or "
      "a "
      "shared backup)\npublic key:  %s\nfingerprint: %s\n",
      files.private_path.c_str(), a.cell.empty() ? "the reviewer" : "the cell's account",
      files.public_path.c_str(), files.fingerprint.c_str());
  if (!a.cell.empty())
    std::printf("add to the cell file:\n  [records]\n  public_key = \"%s\"\n", files.fingerprint.c_str());
  else
    std::printf(
        "verify trusts this reviewer's approvals once %s is in the data root's keys/ (or given with "
        "--reviewer-key)\n",
        (stem + ".pub.pem").c_str());
  return kAccepted;
}

int fingerprint(const KeysArgs& a) {
  std::string err;
  if (auto k = record::PublicKey::load(a.pem, err)) {
    std::printf("%s\n", k->fingerprint().c_str());
    return kAccepted;
  }
  if (auto s = record::SigningKey::load(a.pem, err)) {
    std::printf("%s\n", s->fingerprint().c_str());
    return kAccepted;
  }
  std::fprintf(stderr, "loadtrim keys fingerprint: %s\n", err.c_str());
  return kBadInput;
}

}  // namespace

void register_keys_command(CLI::App& app, Runner& run) {
  auto a = std::make_shared<KeysArgs>();
  auto* keys = app.add_subcommand(
      "keys", "Ed25519 key pairs for sealing folders (a cell's) and approving them (a reviewer's)");
  keys->require_subcommand(1);
  auto* c = keys->add_subcommand(
      "create", "create a key pair: <dir>/cell-NAME.key.pem (0600) and .pub.pem, or reviewer-NAME.*");
  auto* cell = c->add_option("--cell", a->cell, "the cell's name, as in its cell file");
  auto* rev = c->add_option("--reviewer", a->reviewer, "the reviewer's name, as given to approve");
  cell->excludes(rev);
  c->add_option("--out", a->out, "where to write the pair (default: the data root's keys/, mode 0700)");
  c->add_option("--data-dir", a->data_dir,
                "the lab's data root (now: " + record::find_data_root("").describe() + ")");
  c->callback([a, &run] { run = [a] { return create(*a); }; });
  auto* f = keys->add_subcommand("fingerprint",
                                 "print the fingerprint (sha256:...) of a public or private key PEM");
  f->add_option("pem", a->pem, "the key file")->required()->check(CLI::ExistingFile);
  f->callback([a, &run] { run = [a] { return fingerprint(*a); }; });
}

}  // namespace loadtrim::app
