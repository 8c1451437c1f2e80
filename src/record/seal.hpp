// Ed25519 keys (OpenSSL 3 EVP), the seal a finished session or dyno check ends with, and reviewers'
// approvals. docs/records.md describes the formats; this header is the API contract. Nothing here throws
// across the API: failures are `false` / `std::nullopt` with a sentence in `error`.
//
// Keys
//   A key pair is two PEM files: the private key (PKCS#8, unencrypted, mode 0600) and the public key
//   (SubjectPublicKeyInfo, mode 0644). A key's fingerprint is "sha256:" + the hex SHA-256 of its raw 32-byte
//   public key (RFC 8032 §5.1.5 encoding). In a data root's keys/ directory (mode 0700) the files are named
//   cell-<name>.key.pem / cell-<name>.pub.pem and reviewer-<name>.key.pem / reviewer-<name>.pub.pem, <name>
//   being record::safe_name of the cell's or the reviewer's name.
//
// The seal
//   The last record a finished folder gets, of type "seal", appended to events.jsonl after every other
//   record:
//     {"seq", "utc", "type": "seal", "prev", "format": "loadtrim-seal-1", "chain_head", "cell",
//      "files": [{"path", "sha256", "bytes"}, ...], "result", "signer", "signature"}
//   chain_head == prev (the SHA-256 of the line before the seal); files: every regular file in the folder
//   except events.jsonl and the derived files (derived_files()), sorted bytewise by folder-relative path;
//   result: what the caller sealed (the session's summary, a check's result); signer: the key's fingerprint;
//   signature: the Ed25519 signature, lower-case hex, over signed_message(record). An unsigned seal (no key
//   configured) has signer "" and signature ""; verify never treats it as signed (its own outcome, exit code
//   7).
//
// Approvals
//   After the seal, only "approval" records may follow:
//     {"seq", "utc", "type": "approval", "prev", "format": "loadtrim-approval-1", "reviewer", "statement",
//      "seal", "chain_head", "signer", "signature"}
//   seal: the SHA-256 of the seal's line; chain_head: the seal's chain_head; signed like the seal with the
//   reviewer's own key.
#pragma once

#include <cstdint>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

struct evp_pkey_st;  // OpenSSL's EVP_PKEY, kept out of this header

namespace loadtrim::record {

inline constexpr const char* kSealFormat = "loadtrim-seal-1";
inline constexpr const char* kApprovalFormat = "loadtrim-approval-1";

class PublicKey {
 public:
  PublicKey() = default;
  static std::optional<PublicKey> from_pem(const std::string& pem, std::string& error);
  static std::optional<PublicKey> load(const std::string& path, std::string& error);  // a PEM file
  static std::optional<PublicKey> from_raw(std::string_view raw32, std::string& error);
  bool valid() const { return key_ != nullptr; }
  const std::string& fingerprint() const { return fingerprint_; }  // "sha256:<64 hex>"
  std::string pem() const;
  // True only when signature_hex is 128 hex digits and a valid Ed25519 signature of message under this key.
  bool verify(std::string_view message, const std::string& signature_hex) const;

 private:
  friend class SigningKey;
  std::shared_ptr<evp_pkey_st> key_;
  std::string fingerprint_;
};

class SigningKey {
 public:
  // Loads a private key PEM. Refuses a file that is not a regular file, or that its group or others may read
  // or write (as ssh does): a signing key that others can read no longer identifies the cell.
  static std::optional<SigningKey> load(const std::string& path, std::string& error);
  // From the raw 32-byte secret (RFC 8032 §5.1.5), for test vectors.
  static std::optional<SigningKey> from_raw(std::string_view raw32, std::string& error);
  const PublicKey& public_key() const { return public_; }
  const std::string& fingerprint() const { return public_.fingerprint(); }
  const std::string& path() const { return path_; }
  // Signs message; the signature as 128 lower-case hex digits.
  bool sign(std::string_view message, std::string& signature_hex, std::string& error) const;

 private:
  std::shared_ptr<evp_pkey_st> key_;
  PublicKey public_;
  std::string path_;
};

struct KeyPairFiles {
  std::string private_path, public_path, fingerprint;
};
// Creates a new Ed25519 key pair. The private key is written to a temporary file created with O_EXCL and mode
// 0600 (never readable by others at any moment, whatever the umask), fsync'd, and linked to private_path with
// link(2), which refuses an existing file; the public key likewise with mode 0644. Never overwrites a key:
// when either file exists, nothing is written. On any failure nothing is left behind.
bool create_key_pair(const std::string& private_path, const std::string& public_path, KeyPairFiles* out,
                     std::string& error);

// File-name stems in a keys/ directory: "cell-<safe name>" and "reviewer-<safe name>".
std::string cell_key_stem(const std::string& cell_name);
std::string reviewer_key_stem(const std::string& reviewer);

// The signing key a cell file's [records] table names (docs/records.md): private_key (absolute, or relative
// to the data root; "" = <data_root>/keys/cell-<name>.key.pem), which must match public_key (a "sha256:"
// fingerprint, or a .pub.pem path, absolute or relative to the data root). nullopt with error when it cannot
// be loaded or does not match: the session or check must then refuse to start.
std::optional<SigningKey> load_cell_signing_key(const std::string& data_root, const std::string& cell_name,
                                                const std::string& public_key, const std::string& private_key,
                                                std::string& error);

// The canonical serialisation a seal's or an approval's signature covers: the record's "format" value, a
// '\n', and the record without its "signature" member as compact JSON with keys in byte order and every
// non-ASCII character escaped (\uXXXX). Empty when the record is not a JSON object.
std::string signed_message(const nlohmann::json& record);

// Files at the top of a folder that are made from its records and may be rewritten at any time (loadtrim
// report): report.html, report.pdf, coefficients.csv, deviations.csv, and their ".tmp" while being written.
// They are neither sealed nor required; verify ignores them. Everything else in the folder is sealed.
const std::vector<std::string>& derived_files();
bool is_derived_file(const std::string& rel);

struct SealRequest {
  std::string cell;                                  // the cell's name, as in its file
  nlohmann::json result = nlohmann::json::object();  // the session's summary / the check's result
  const SigningKey* key = nullptr;                   // nullptr: an unsigned seal
  std::string utc;                                   // empty: now
};

struct SealInfo {
  std::string folder;       // absolute path at sealing
  std::uint64_t seq = 0;    // the seal record's seq
  std::string origin;       // SHA-256 of record 0's line: the folder's identity in the cell log
  std::string chain_head;   // SHA-256 of the record before the seal
  std::string seal_sha256;  // SHA-256 of the seal's line (what approvals and the cell log name)
  std::string signer;       // fingerprint, "" when unsigned
  std::size_t files = 0;
  std::string utc;
  // Repairs made on the way, for the caller to report: a torn last line cut from the folder's log when it
  // was opened for the seal (checks::seal_and_log adds one cut from the cell log).
  std::vector<std::string> notes;
};

// Seals a finished folder: checks it first (chain, every recorded file hash, no unsafe path, no link, no
// special file, no seal yet), fsyncs every file it covers and the directories holding them (operator.log is
// written through a buffered sink and never synced by its writer), hashes every file, signs, and appends
// the seal record durably: a seal never covers a file that a power loss could still change. Call it once,
// after the last record and the last write to any file of the folder (operator.log included); afterwards only
// approvals and derived files may be added. Refused, with the folder unchanged, when the folder is not
// intact, is already sealed, its summary.json (else result.json) disagrees with request.result, its own cell
// file (inputs/cell.toml, [records] public_key) names a key other than request.key, or the record could not
// be made durable.
bool seal_folder(const std::string& folder, const SealRequest& request, SealInfo* info, std::string& error);

struct ApprovalRequest {
  std::string reviewer;             // the reviewer's name
  std::string statement;            // what the reviewer states (free text)
  const SigningKey* key = nullptr;  // the reviewer's own key; required
  std::string utc;                  // empty: now
};
struct ApprovalInfo {
  std::uint64_t seq = 0;
  std::string seal_sha256, chain_head, signer;
};
// Appends a signed approval of the folder's seal. The folder must be sealed and intact (chain, files, seal
// coverage); callers should also have it verified with the cell's key (verify_folder) before asking a
// reviewer to sign, as `loadtrim approve` does, and hold the folder's lock (app/cell_locks.hpp, lock_folder)
// across that verify and this call, so that no other approval is appended in between. Just before writing,
// the log is read again: when it no longer ends at the record the approval's seq and prev follow (another
// process wrote to it), the approval is refused and nothing is written.
bool approve_folder(const std::string& folder, const ApprovalRequest& request, ApprovalInfo* info,
                    std::string& error);

}  // namespace loadtrim::record
