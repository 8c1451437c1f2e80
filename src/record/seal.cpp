#include "record/seal.hpp"

#include <fcntl.h>
#include <openssl/bio.h>
#include <openssl/crypto.h>
#include <openssl/err.h>
#include <openssl/evp.h>
#include <openssl/pem.h>
#include <openssl/rand.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <filesystem>
#include <set>

#include "record/data_root.hpp"
#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "record/verify.hpp"

namespace loadtrim::record {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

std::shared_ptr<evp_pkey_st> own(EVP_PKEY* k) {
  return std::shared_ptr<evp_pkey_st>(k, EVP_PKEY_free);
}

std::string openssl_error() {
  const unsigned long e = ERR_get_error();
  ERR_clear_error();
  if (!e) return "OpenSSL reported no detail";
  char buf[256];
  ERR_error_string_n(e, buf, sizeof buf);
  return buf;
}

std::string to_hex(const unsigned char* d, std::size_t n) {
  static const char* k = "0123456789abcdef";
  std::string s;
  s.reserve(2 * n);
  for (std::size_t i = 0; i < n; ++i) {
    s += k[d[i] >> 4];
    s += k[d[i] & 15];
  }
  return s;
}

bool from_hex(const std::string& h, std::string& out) {
  if (h.size() % 2) return false;
  out.clear();
  auto nib = [](char c) -> int {
    if (c >= '0' && c <= '9') return c - '0';
    if (c >= 'a' && c <= 'f') return c - 'a' + 10;
    return -1;  // lower-case only: one spelling per signature
  };
  for (std::size_t i = 0; i < h.size(); i += 2) {
    const int a = nib(h[i]), b = nib(h[i + 1]);
    if (a < 0 || b < 0) return false;
    out += static_cast<char>((a << 4) | b);
  }
  return true;
}

// The fingerprint of an Ed25519 key: sha256 of the raw 32-byte public key.
bool fingerprint_of(EVP_PKEY* k, std::string& fp, std::string& error) {
  if (EVP_PKEY_get_id(k) != EVP_PKEY_ED25519) {
    error = "not an Ed25519 key";
    return false;
  }
  unsigned char raw[64];
  std::size_t len = sizeof raw;
  if (EVP_PKEY_get_raw_public_key(k, raw, &len) != 1 || len != 32) {
    error = "cannot read the public key: " + openssl_error();
    return false;
  }
  fp = "sha256:" + sha256_hex(std::string_view(reinterpret_cast<const char*>(raw), len));
  return true;
}

// Never prompts for a pass phrase (an encrypted key is refused rather than asked about on the terminal).
int no_passphrase(char*, int, int, void*) {
  return -1;
}

bool read_fd(int fd, std::string& out) {
  char buf[4096];
  for (;;) {
    const ssize_t n = ::read(fd, buf, sizeof buf);
    if (n < 0 && errno == EINTR) continue;
    if (n < 0) return false;
    if (n == 0) return true;
    out.append(buf, static_cast<std::size_t>(n));
    if (out.size() > (1u << 20)) return false;  // no key file is this large
  }
}

// fsync(2) of the directory holding `path`, so that a name made in it survives a power loss.
bool fsync_dir(const std::string& path, std::string& error) {
  const std::string dir = fs::path(path).parent_path().empty() ? "." : fs::path(path).parent_path().string();
  return sync_directory(dir, error);
}

// Writes a new file that must not exist yet: a temporary file made with O_EXCL and `mode` from its first
// moment (fchmod makes the mode exact whatever the umask), then link(2) to the final name, which fails on an
// existing file, so a key is never overwritten and never half-written under its name.
bool write_new_file(const std::string& path, const std::string& content, mode_t mode, std::string& error) {
  unsigned char rnd[8];
  if (RAND_bytes(rnd, sizeof rnd) != 1) {
    error = "no randomness for a temporary name: " + openssl_error();
    return false;
  }
  const fs::path p(path);
  const std::string tmp =
      (p.parent_path() / ("." + p.filename().string() + ".tmp-" + to_hex(rnd, sizeof rnd))).string();
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_EXCL | O_NOFOLLOW | O_CLOEXEC, mode);
  if (fd < 0) {
    error = "cannot create " + tmp + ": " + std::strerror(errno);
    return false;
  }
  auto fail = [&](const std::string& what) {
    error = what + ": " + std::strerror(errno);
    ::close(fd);
    ::unlink(tmp.c_str());
    return false;
  };
  if (::fchmod(fd, mode) != 0) return fail("cannot set the mode of " + tmp);
  std::size_t done = 0;
  while (done < content.size()) {
    const ssize_t w = ::write(fd, content.data() + done, content.size() - done);
    if (w < 0 && errno == EINTR) continue;
    if (w < 0) return fail("cannot write " + tmp);
    done += static_cast<std::size_t>(w);
  }
  if (::fsync(fd) != 0) return fail("cannot sync " + tmp);
  if (::close(fd) != 0) {
    error = "cannot close " + tmp + ": " + std::strerror(errno);
    ::unlink(tmp.c_str());
    return false;
  }
  if (::link(tmp.c_str(), path.c_str()) != 0) {
    error = errno == EEXIST ? path + " already exists; a key is never overwritten"
                            : "cannot create " + path + ": " + std::strerror(errno);
    ::unlink(tmp.c_str());
    return false;
  }
  ::unlink(tmp.c_str());
  if (std::string derr; !fsync_dir(path, derr)) {
    // Not durable: a power loss could take the key back. Nothing is left behind (the key is of no use then).
    error = "cannot make " + path + " durable: " + derr;
    ::unlink(path.c_str());
    return false;
  }
  return true;
}

std::string pem_of(EVP_PKEY* k, bool priv) {
  BIO* b = BIO_new(BIO_s_mem());
  if (!b) return "";
  const int ok = priv ? PEM_write_bio_PrivateKey(b, k, nullptr, nullptr, 0, nullptr, nullptr)
                      : PEM_write_bio_PUBKEY(b, k);
  std::string out;
  if (ok == 1) {
    char* data = nullptr;
    const long n = BIO_get_mem_data(b, &data);
    if (n > 0 && data) out.assign(data, static_cast<std::size_t>(n));
  }
  BIO_free(b);  // a memory BIO: BIO_free releases (but does not wipe) its buffer; ours is wiped by the caller
  return out;
}

void wipe(std::string& s) {
  if (!s.empty()) OPENSSL_cleanse(s.data(), s.size());
  s.clear();
}

// Round-trips through the log's own encoding (invalid UTF-8 replaced), so what is signed is exactly what the
// line will parse back to.
json normalised(const json& j) {
  return json::parse(j.dump(-1, ' ', false, json::error_handler_t::replace));
}

json payload_of(const json& rec) {
  json p = rec;
  for (const char* k : {"seq", "utc", "type", "prev"}) p.erase(k);
  return p;
}

}  // namespace

// ---- PublicKey ----

std::optional<PublicKey> PublicKey::from_pem(const std::string& pem, std::string& error) {
  BIO* b = BIO_new_mem_buf(pem.data(), static_cast<int>(pem.size()));
  if (!b) {
    error = "out of memory";
    return std::nullopt;
  }
  EVP_PKEY* k = PEM_read_bio_PUBKEY(b, nullptr, no_passphrase, nullptr);
  BIO_free(b);
  if (!k) {
    error = "not a PEM public key: " + openssl_error();
    return std::nullopt;
  }
  PublicKey p;
  p.key_ = own(k);
  if (!fingerprint_of(k, p.fingerprint_, error)) return std::nullopt;
  return p;
}

std::optional<PublicKey> PublicKey::load(const std::string& path, std::string& error) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_NONBLOCK | O_NOCTTY | O_CLOEXEC);
  if (fd < 0) {
    error = "cannot open " + path + ": " + std::strerror(errno);
    return std::nullopt;
  }
  struct stat st {};
  std::string pem;
  const bool ok = ::fstat(fd, &st) == 0 && S_ISREG(st.st_mode) && read_fd(fd, pem);
  ::close(fd);
  if (!ok) {
    error = "cannot read " + path + " (not a regular file, or unreadable)";
    return std::nullopt;
  }
  auto k = from_pem(pem, error);
  if (!k) error = path + ": " + error;
  return k;
}

std::optional<PublicKey> PublicKey::from_raw(std::string_view raw32, std::string& error) {
  if (raw32.size() != 32) {
    error = "an Ed25519 public key has 32 bytes";
    return std::nullopt;
  }
  EVP_PKEY* k = EVP_PKEY_new_raw_public_key(EVP_PKEY_ED25519, nullptr,
                                            reinterpret_cast<const unsigned char*>(raw32.data()), 32);
  if (!k) {
    error = "not an Ed25519 public key: " + openssl_error();
    return std::nullopt;
  }
  PublicKey p;
  p.key_ = own(k);
  if (!fingerprint_of(k, p.fingerprint_, error)) return std::nullopt;
  return p;
}

std::string PublicKey::pem() const {
  return key_ ? pem_of(key_.get(), false) : std::string();
}

bool PublicKey::verify(std::string_view message, const std::string& signature_hex) const {
  if (!key_ || signature_hex.size() != 128) return false;
  std::string sig;
  if (!from_hex(signature_hex, sig)) return false;
  EVP_MD_CTX* ctx = EVP_MD_CTX_new();
  if (!ctx) return false;
  // Ed25519 is a one-shot signature: no digest is named (RFC 8032 hashes internally with SHA-512).
  const bool ok =
      EVP_DigestVerifyInit(ctx, nullptr, nullptr, nullptr, key_.get()) == 1 &&
      EVP_DigestVerify(ctx, reinterpret_cast<const unsigned char*>(sig.data()), sig.size(),
                       reinterpret_cast<const unsigned char*>(message.data()), message.size()) == 1;
  EVP_MD_CTX_free(ctx);
  ERR_clear_error();
  return ok;
}

// ---- SigningKey ----

std::optional<SigningKey> SigningKey::load(const std::string& path, std::string& error) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_NONBLOCK | O_NOCTTY | O_CLOEXEC);
  if (fd < 0) {
    error = "cannot open the private key " + path + ": " + std::strerror(errno);
    return std::nullopt;
  }
  struct stat st {};
  if (::fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
    ::close(fd);
    error = path + " is not a regular file";
    return std::nullopt;
  }
  if (st.st_mode & 077) {
    ::close(fd);
    char mode[8];
    std::snprintf(mode, sizeof mode, "%04o", static_cast<unsigned>(st.st_mode & 07777));
    error = "the private key " + path + " has mode " + mode +
            ": others may read or change it, so it no longer identifies "
            "its owner; refused (chmod 600, or better, make a new key pair)";
    return std::nullopt;
  }
  std::string pem;
  const bool read_ok = read_fd(fd, pem);
  ::close(fd);
  if (!read_ok) {
    wipe(pem);
    error = "cannot read the private key " + path;
    return std::nullopt;
  }
  BIO* b = BIO_new_mem_buf(pem.data(), static_cast<int>(pem.size()));
  EVP_PKEY* k = b ? PEM_read_bio_PrivateKey(b, nullptr, no_passphrase, nullptr) : nullptr;
  if (b) BIO_free(b);
  wipe(pem);
  if (!k) {
    error = path + " is not an unencrypted PEM private key: " + openssl_error();
    return std::nullopt;
  }
  SigningKey s;
  s.key_ = own(k);
  s.public_.key_ = s.key_;
  if (!fingerprint_of(k, s.public_.fingerprint_, error)) {
    error = path + ": " + error;
    return std::nullopt;
  }
  s.path_ = path;
  return s;
}

std::optional<SigningKey> SigningKey::from_raw(std::string_view raw32, std::string& error) {
  if (raw32.size() != 32) {
    error = "an Ed25519 secret key has 32 bytes";
    return std::nullopt;
  }
  EVP_PKEY* k = EVP_PKEY_new_raw_private_key(EVP_PKEY_ED25519, nullptr,
                                             reinterpret_cast<const unsigned char*>(raw32.data()), 32);
  if (!k) {
    error = "not an Ed25519 secret key: " + openssl_error();
    return std::nullopt;
  }
  SigningKey s;
  s.key_ = own(k);
  s.public_.key_ = s.key_;
  if (!fingerprint_of(k, s.public_.fingerprint_, error)) return std::nullopt;
  return s;
}

bool SigningKey::sign(std::string_view message, std::string& signature_hex, std::string& error) const {
  if (!key_) {
    error = "no key";
    return false;
  }
  EVP_MD_CTX* ctx = EVP_MD_CTX_new();
  if (!ctx) {
    error = "out of memory";
    return false;
  }
  unsigned char sig[64];
  std::size_t len = sizeof sig;
  const bool ok = EVP_DigestSignInit(ctx, nullptr, nullptr, nullptr, key_.get()) == 1 &&
                  EVP_DigestSign(ctx, sig, &len, reinterpret_cast<const unsigned char*>(message.data()),
                                 message.size()) == 1 &&
                  len == 64;
  EVP_MD_CTX_free(ctx);
  if (!ok) {
    error = "Ed25519 signing failed: " + openssl_error();
    return false;
  }
  signature_hex = to_hex(sig, len);
  return true;
}

// ---- key pair files ----

bool create_key_pair(const std::string& private_path, const std::string& public_path, KeyPairFiles* out,
                     std::string& error) {
  struct stat st {};
  for (const auto& p : {private_path, public_path})
    if (::lstat(p.c_str(), &st) == 0) {
      error = p +
              " already exists; a key is never overwritten (remove or move it first if it is really to be "
              "replaced)";
      return false;
    }
  EVP_PKEY_CTX* pctx = EVP_PKEY_CTX_new_id(EVP_PKEY_ED25519, nullptr);
  EVP_PKEY* k = nullptr;
  const bool gen = pctx && EVP_PKEY_keygen_init(pctx) == 1 && EVP_PKEY_keygen(pctx, &k) == 1;
  EVP_PKEY_CTX_free(pctx);
  if (!gen || !k) {
    error = "Ed25519 key generation failed: " + openssl_error();
    return false;
  }
  const auto key = own(k);
  std::string fp;
  if (!fingerprint_of(k, fp, error)) return false;
  std::string priv = pem_of(k, true);
  const std::string pub = pem_of(k, false);
  if (priv.empty() || pub.empty()) {
    wipe(priv);
    error = "cannot encode the key pair: " + openssl_error();
    return false;
  }
  const bool wrote_priv = write_new_file(private_path, priv, 0600, error);
  wipe(priv);
  if (!wrote_priv) return false;
  if (!write_new_file(public_path, pub, 0644, error)) {
    ::unlink(private_path.c_str());  // a private key without its public half is of no use and must not linger
    std::string ignored;             // the error already says why; the unlink is best effort
    (void)fsync_dir(private_path, ignored);
    return false;
  }
  if (out) *out = {private_path, public_path, fp};
  return true;
}

std::string cell_key_stem(const std::string& cell_name) {
  return "cell-" + identity_name(cell_name);
}
std::string reviewer_key_stem(const std::string& reviewer) {
  return "reviewer-" + identity_name(reviewer);
}

std::optional<SigningKey> load_cell_signing_key(const std::string& data_root, const std::string& cell_name,
                                                const std::string& public_key, const std::string& private_key,
                                                std::string& error) {
  auto in_root = [&](const std::string& p) {
    return fs::path(p).is_absolute() ? p : (fs::path(data_root) / p).string();
  };
  const std::string priv =
      private_key.empty() ? (fs::path(data_root) / "keys" / (cell_key_stem(cell_name) + ".key.pem")).string()
                          : in_root(private_key);
  auto key = SigningKey::load(priv, error);
  if (!key) return std::nullopt;
  std::string expected = public_key;
  if (!public_key.empty() && public_key.rfind("sha256:", 0) != 0) {
    const auto pk = PublicKey::load(in_root(public_key), error);
    if (!pk) return std::nullopt;
    expected = pk->fingerprint();
  }
  if (!expected.empty() && expected != key->fingerprint()) {
    error = "the cell's signing key " + priv + " is " + key->fingerprint() + ", but the cell file names " +
            expected;
    return std::nullopt;
  }
  return key;
}

// ---- canonical form ----

std::string signed_message(const json& record) {
  if (!record.is_object()) return "";
  json j = record;
  j.erase("signature");
  try {
    // nlohmann::json objects keep their members in std::map order: byte order of the keys.
    return j.value("format", std::string()) + "\n" + j.dump(-1, ' ', true, json::error_handler_t::strict);
  } catch (const std::exception&) {
    return "";
  }
}

const std::vector<std::string>& derived_files() {
  static const std::vector<std::string> k = {"report.html", "report.pdf", "coefficients.csv",
                                             "deviations.csv"};
  return k;
}

bool is_derived_file(const std::string& rel) {
  for (const auto& d : derived_files())
    if (rel == d || rel == d + ".tmp") return true;
  return false;
}

// ---- seal and approval ----

bool seal_folder(const std::string& folder_in, const SealRequest& req, SealInfo* info, std::string& error) {
  try {
    const std::string folder = fs::absolute(folder_in).lexically_normal().string();
    const FolderVerdict before = verify_folder(folder);
    if (before.outcome == Outcome::broken) {
      error = "refusing to seal " + folder + ": it is not intact: " + before.message;
      return false;
    }
    if (before.seal) {
      error = folder + " is already sealed (record " + std::to_string(before.seal->seq) + ")";
      return false;
    }
    EventLog log((fs::path(folder) / "events.jsonl").string());
    if (!log.error().empty()) {
      error = log.error();
      return false;
    }
    std::vector<std::string> notes;
    if (!log.repaired().empty()) notes.push_back(folder + "/events.jsonl: " + log.repaired());
    const InsideFile events = read_inside(folder, "events.jsonl");
    if (events.status != InsideStatus::ok) {
      error = "refusing to seal " + folder + ": " + events.error;
      return false;
    }
    std::vector<LogLine> lines;
    if (!parse_log(events.content, &lines).ok || lines.empty() || lines.size() != log.records() ||
        lines.back().sha256 != log.last_hash()) {
      error = "refusing to seal " + folder + ": its log is empty or changed while it was being sealed";
      return false;
    }
    const FolderListing listing = list_inside(folder);
    if (!listing.ok) {
      error = "refusing to seal " + folder + ": " + listing.error;
      return false;
    }
    // What the seal hashes must be what a power loss leaves: every covered file fsync'd (operator.log is
    // written through spdlog's buffered sink, which never syncs), and the directories holding them, for their
    // names (docs/records.md, "The seal").
    std::set<std::string> dirs = {""};
    for (const auto& rel : listing.files) {
      if (rel == "events.jsonl" || is_derived_file(rel)) continue;
      if (const InsideFile synced = sync_inside(folder, rel); synced.status != InsideStatus::ok) {
        error = "refusing to seal " + folder + ": " + synced.error;
        return false;
      }
      for (auto slash = rel.find('/'); slash != std::string::npos; slash = rel.find('/', slash + 1))
        dirs.insert(rel.substr(0, slash));
    }
    for (const auto& d : dirs) {
      std::string err;
      if (!sync_directory(d.empty() ? folder : (fs::path(folder) / d).string(), err)) {
        error = "refusing to seal " + folder + ": " + err;
        return false;
      }
    }
    json files = json::array();
    for (const auto& rel : listing.files) {
      if (rel == "events.jsonl" || is_derived_file(rel)) continue;
      const InsideHash h = hash_inside(folder, rel);
      if (h.status != InsideStatus::ok) {
        error = "refusing to seal " + folder + ": " + h.error;
        return false;
      }
      files.push_back({{"path", rel}, {"sha256", h.sha256}, {"bytes", h.bytes}});
    }
    const json result = normalised(req.result.is_null() ? json::object() : req.result);
    if (!result.is_object()) {
      error = "refusing to seal " + folder + ": the result to seal is not a JSON object";
      return false;
    }
    if (const std::string d = result_disagreement(folder, result); !d.empty()) {
      error = "refusing to seal " + folder + ": " + d;
      return false;
    }
    // A folder whose own cell file names the cell's key is sealed with that key or not at all (verify would
    // refuse anything else).
    if (const InsideFile cf = read_inside(folder, "inputs/cell.toml"); cf.status != InsideStatus::missing) {
      if (cf.status != InsideStatus::ok) {
        error = "refusing to seal " + folder + ": " + cf.error;
        return false;
      }
      std::string terr;
      const auto named = toml_string_value(cf.content, "records", "public_key", &terr);
      if (named && named->rfind("sha256:", 0) == 0 && (!req.key || req.key->fingerprint() != *named)) {
        error = "refusing to seal " + folder + ": its cell file (inputs/cell.toml) names the key " + *named +
                ", and " +
                (req.key ? "the signing key is " + req.key->fingerprint()
                         : std::string("no signing key was given"));
        return false;
      }
    }
    const std::string utc = req.utc.empty() ? utc_now() : req.utc;
    json rec = {{"seq", log.records()},  {"utc", utc},
                {"type", "seal"},        {"prev", log.last_hash()},
                {"format", kSealFormat}, {"chain_head", log.last_hash()},
                {"cell", req.cell},      {"files", files},
                {"result", result},      {"signer", req.key ? req.key->fingerprint() : std::string()},
                {"signature", ""}};
    rec = normalised(rec);
    if (req.key) {
      std::string sig;
      const std::string msg = signed_message(rec);
      if (msg.empty() || !req.key->sign(msg, sig, error)) {
        if (error.empty()) error = "cannot serialise the seal";
        return false;
      }
      rec["signature"] = sig;
    }
    if (!log.append("seal", payload_of(rec), utc)) {
      error = log.error();
      return false;
    }
    if (info) {
      *info = SealInfo{folder,
                       rec["seq"].get<std::uint64_t>(),
                       lines.front().sha256,
                       rec["chain_head"].get<std::string>(),
                       log.last_hash(),
                       rec["signer"].get<std::string>(),
                       files.size(),
                       utc,
                       notes};
    }
    // Self-check: the folder as sealed must read back as sealed and intact (catches any drift between what
    // was signed and what the line parses back to).
    const FolderVerdict after = verify_folder(folder);
    if (!after.intact() || !after.seal) {
      error = "sealed " + folder + ", but it does not verify afterwards: " + after.message;
      return false;
    }
    return true;
  } catch (const std::exception& e) {
    error = std::string("cannot seal the folder: ") + e.what();
    return false;
  }
}

bool approve_folder(const std::string& folder_in, const ApprovalRequest& req, ApprovalInfo* info,
                    std::string& error) {
  try {
    if (!req.key) {
      error = "an approval must be signed with the reviewer's key";
      return false;
    }
    if (req.reviewer.empty() || req.statement.empty()) {
      error = "an approval needs the reviewer's name and a statement";
      return false;
    }
    const std::string folder = fs::absolute(folder_in).lexically_normal().string();
    const FolderVerdict v = verify_folder(folder);
    if (v.outcome == Outcome::broken) {
      error = "refusing to approve " + folder + ": it is broken: " + v.message;
      return false;
    }
    if (!v.seal) {
      error = "refusing to approve " + folder + ": it is not sealed (not finished)";
      return false;
    }
    EventLog log((fs::path(folder) / "events.jsonl").string());
    if (!log.error().empty()) {
      error = log.error();
      return false;
    }
    const std::string utc = req.utc.empty() ? utc_now() : req.utc;
    json rec = {{"seq", log.records()},
                {"utc", utc},
                {"type", "approval"},
                {"prev", log.last_hash()},
                {"format", kApprovalFormat},
                {"reviewer", req.reviewer},
                {"statement", req.statement},
                {"seal", v.seal->seal_sha256},
                {"chain_head", v.seal->chain_head},
                {"signer", req.key->fingerprint()},
                {"signature", ""}};
    rec = normalised(rec);
    std::string sig;
    const std::string msg = signed_message(rec);
    if (msg.empty() || !req.key->sign(msg, sig, error)) {
      if (error.empty()) error = "cannot serialise the approval";
      return false;
    }
    rec["signature"] = sig;
    // Just before writing: the log still ends where it ended when it was opened (the approval's seq and prev
    // name its last record). Another writer in between (a second approver that did not take the folder's
    // lock) would otherwise make two records with one seq.
    {
      const InsideFile now = read_inside(folder, "events.jsonl");
      std::vector<LogLine> lines;
      bool torn = false;
      if (now.status != InsideStatus::ok || !parse_log(now.content, &lines, &torn).ok || torn ||
          lines.size() != log.records() || lines.empty() || lines.back().sha256 != log.last_hash()) {
        error = "refusing to approve " + folder +
                ": its events.jsonl changed while the approval was being made" +
                " (another process wrote to it; it no longer ends at record " +
                std::to_string(log.records() - 1) + "); nothing was written";
        return false;
      }
    }
    if (!log.append("approval", payload_of(rec), utc)) {
      error = log.error();
      return false;
    }
    if (info)
      *info = {rec["seq"].get<std::uint64_t>(), v.seal->seal_sha256, v.seal->chain_head,
               req.key->fingerprint()};
    return true;
  } catch (const std::exception& e) {
    error = std::string("cannot approve the folder: ") + e.what();
    return false;
  }
}

}  // namespace loadtrim::record
