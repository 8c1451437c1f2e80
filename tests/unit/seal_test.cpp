// Keys, signatures, the seal and approvals (record/seal.hpp, record/verify.hpp), the folder reader that never
// leaves its folder (record/inside.hpp), and write_durable's clean-up. External references: RFC 8032 §7.1
// (Ed25519 test vectors 1–3: secret, public key, message, signature), and Python's hashlib for the SHA-256
// fingerprint of test 1's public key (python3 -c "hashlib.sha256(bytes.fromhex(...)).hexdigest()").
#include "record/seal.hpp"

#include <gtest/gtest.h>
#include <signal.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <filesystem>
#include <fstream>

#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/session_folder.hpp"
#include "record/sha256.hpp"
#include "record/verify.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;
using nlohmann::json;

namespace {

std::string temp_dir(const std::string& tag) {
  std::string t = (fs::temp_directory_path() / ("loadtrim-" + tag + "-XXXXXX")).string();
  if (!::mkdtemp(t.data())) throw std::runtime_error("mkdtemp failed");
  return t;
}

std::string unhex(const std::string& h) {
  std::string out;
  for (std::size_t i = 0; i + 1 < h.size(); i += 2)
    out += static_cast<char>(std::stoi(h.substr(i, 2), nullptr, 16));
  return out;
}

void write(const std::string& path, const std::string& text) {
  std::ofstream(path, std::ios::binary) << text;
}

std::string slurp(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::string(std::istreambuf_iterator<char>(in), {});
}

mode_t mode_of(const std::string& path) {
  struct stat st {};
  EXPECT_EQ(::stat(path.c_str(), &st), 0) << path;
  return st.st_mode & 07777;
}

// A small finished folder of our own: inputs, a trace, summary.json, operator.log, and a log recording them.
std::string make_folder(const std::string& root, const std::string& cell_toml = "name = \"unit cell\"\n") {
  const std::string f = root + "/session";
  fs::create_directories(f + "/inputs");
  fs::create_directories(f + "/traces");
  write(f + "/inputs/cell.toml", cell_toml);
  const std::string trace =
      "index,time_s,speed_kmh,force_n,mode,flags\n0,0.0000,130.0000,0.00,road_load,0\n1,0.0100,129.9000,0.00,"
      "road_load,0\n";
  write(f + "/traces/run-001.csv", trace);
  const json summary = {{"result", "accepted"}, {"accepted", true}, {"coastdowns", 1}};
  const std::string stext = summary.dump(2) + "\n";
  write(f + "/summary.json", stext);
  write(f + "/operator.log", "2026-12-02T08:00:00.000Z session started\n");
  record::EventLog log(f + "/events.jsonl");
  EXPECT_TRUE(log.append(
      "session_started",
      {{"cell", "unit cell"},
       {"files", json::array({{{"path", "inputs/cell.toml"}, {"sha256", record::sha256_hex(cell_toml)}}})}},
      "2026-12-02T08:00:00.000Z"));
  EXPECT_TRUE(log.append(
      "coastdown",
      {{"run", 1},
       {"files", json::array({{{"path", "traces/run-001.csv"}, {"sha256", record::sha256_hex(trace)}}})}},
      "2026-12-02T08:10:00.000Z"));
  EXPECT_TRUE(log.append(
      "finished",
      {{"result", "accepted"},
       {"files", json::array({{{"path", "summary.json"}, {"sha256", record::sha256_hex(stext)}}})}},
      "2026-12-02T08:20:00.000Z"));
  return f;
}

}  // namespace

// RFC 8032 §7.1, TEST 1–3: the signature OpenSSL makes from each secret equals the published one, and
// verifies.
TEST(Ed25519, Rfc8032Vectors) {
  struct V {
    const char *secret, *pub, *msg, *sig;
  };
  const V vs[] = {
      {"9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60",
       "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a", "",
       "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf"
       "5f0595bbe24655141438e7a100b"},
      {"4ccd089b28ff96da9db6c346ec114e0f5b8a319f35aba624da8cf6ed4fb8a6fb",
       "3d4017c3e843895a92b70aa74d1b7ebc9c982ccf2ec4968cc0cd55f12af4660c", "72",
       "92a009a9f0d4cab8720e820b5f642540a2b27b5416503f8fb3762223ebdb69da085ac1e43e15996e458f3613d0f11d8c387b2"
       "eaeb4302aeeb00d291612bb0c00"},
      {"c5aa8df43f9f837bedb7442f31dcb7b166d38535076f094b85ce3a2e0b4458f7",
       "fc51cd8e6218a1a38da47ed00230f0580816ed13ba3303ac5deb911548908025", "af82",
       "6291d657deec24024827e69c3abe01a30ce548a284743a445e3680d7db5ac3ac18ff9b538d16f290ae67f760984dc6594a7c1"
       "5e9716ed28dc027beceea1ec40a"},
  };
  for (const auto& v : vs) {
    std::string err;
    const auto sk = record::SigningKey::from_raw(unhex(v.secret), err);
    ASSERT_TRUE(sk) << err;
    const auto pk = record::PublicKey::from_raw(unhex(v.pub), err);
    ASSERT_TRUE(pk) << err;
    EXPECT_EQ(sk->fingerprint(), pk->fingerprint());
    std::string sig;
    ASSERT_TRUE(sk->sign(unhex(v.msg), sig, err)) << err;
    EXPECT_EQ(sig, v.sig);
    EXPECT_TRUE(pk->verify(unhex(v.msg), v.sig));
  }
  // The fingerprint is the SHA-256 of the raw 32-byte key (value from Python's hashlib).
  std::string err;
  EXPECT_EQ(record::PublicKey::from_raw(unhex(vs[0].pub), err)->fingerprint(),
            "sha256:21fe31dfa154a261626bf854046fd2271b7bed4b6abe45aa58877ef47f9721b9");
}

TEST(Ed25519, FlippedBitsAndWrongKeysFail) {
  std::string err;
  const auto a = record::SigningKey::from_raw(
      unhex("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"), err);
  const auto b = record::SigningKey::from_raw(
      unhex("4ccd089b28ff96da9db6c346ec114e0f5b8a319f35aba624da8cf6ed4fb8a6fb"), err);
  ASSERT_TRUE(a && b);
  const std::string msg = "loadtrim-seal-1\n{\"chain_head\":\"00\"}";
  std::string sig;
  ASSERT_TRUE(a->sign(msg, sig, err));
  EXPECT_TRUE(a->public_key().verify(msg, sig));
  for (std::size_t byte = 0; byte < msg.size(); byte += 7) {
    std::string m = msg;
    m[byte] = static_cast<char>(m[byte] ^ 0x01);  // one bit of the message
    EXPECT_FALSE(a->public_key().verify(m, sig)) << "message bit at byte " << byte;
  }
  for (std::size_t i = 0; i < sig.size(); i += 5) {
    std::string s = sig;
    s[i] = s[i] == '0' ? '1' : '0';  // one hex digit of the signature
    EXPECT_FALSE(a->public_key().verify(msg, s)) << "signature digit " << i;
  }
  EXPECT_FALSE(b->public_key().verify(msg, sig)) << "another key";
  EXPECT_FALSE(a->public_key().verify(msg, sig.substr(2))) << "short";
  std::string upper = sig;
  for (auto& c : upper) c = static_cast<char>(std::toupper(static_cast<unsigned char>(c)));
  EXPECT_FALSE(a->public_key().verify(msg, upper)) << "one spelling only";
  EXPECT_FALSE(record::PublicKey().verify(msg, sig)) << "no key";
}

TEST(Keys, CreatedWithSafeModesWhateverTheUmaskAndNeverOverwritten) {
  const std::string dir = temp_dir("keys");
  for (const mode_t mask : {mode_t{0}, mode_t{022}, mode_t{077}}) {
    const mode_t old = ::umask(mask);
    const std::string stem = dir + "/cell-" + std::to_string(mask);
    record::KeyPairFiles files;
    std::string err;
    const bool ok = record::create_key_pair(stem + ".key.pem", stem + ".pub.pem", &files, err);
    ::umask(old);
    ASSERT_TRUE(ok) << err;
    EXPECT_EQ(mode_of(stem + ".key.pem"), 0600u) << "umask " << mask;
    EXPECT_EQ(mode_of(stem + ".pub.pem"), 0644u) << "umask " << mask;
    const auto sk = record::SigningKey::load(stem + ".key.pem", err);
    ASSERT_TRUE(sk) << err;
    const auto pk = record::PublicKey::load(stem + ".pub.pem", err);
    ASSERT_TRUE(pk) << err;
    EXPECT_EQ(sk->fingerprint(), pk->fingerprint());
    EXPECT_EQ(files.fingerprint, pk->fingerprint());
    EXPECT_EQ(files.fingerprint.rfind("sha256:", 0), 0u);
    EXPECT_EQ(files.fingerprint.size(), 7u + 64u);
    std::string sig;
    ASSERT_TRUE(sk->sign("x", sig, err));
    EXPECT_TRUE(pk->verify("x", sig));
  }
  // An existing file is never overwritten, and nothing is written then.
  const std::string before = slurp(dir + "/cell-0.key.pem");
  std::string err;
  EXPECT_FALSE(record::create_key_pair(dir + "/cell-0.key.pem", dir + "/other.pub.pem", nullptr, err));
  EXPECT_NE(err.find("already exists"), std::string::npos) << err;
  EXPECT_EQ(slurp(dir + "/cell-0.key.pem"), before);
  EXPECT_FALSE(fs::exists(dir + "/other.pub.pem"));
  // A public half that cannot be written leaves no private half behind.
  EXPECT_FALSE(
      record::create_key_pair(dir + "/lonely.key.pem", dir + "/no-such-dir/lonely.pub.pem", nullptr, err));
  EXPECT_FALSE(fs::exists(dir + "/lonely.key.pem"));
  // No temporary file remains from any of this.
  for (const auto& e : fs::directory_iterator(dir))
    EXPECT_EQ(e.path().string().find(".tmp"), std::string::npos) << e.path();
  fs::remove_all(dir);
}

TEST(Keys, CellSigningKeyAsTheCellFileNamesIt) {
  const std::string root = temp_dir("cellkey");
  fs::create_directories(root + "/keys");
  std::string err;
  record::KeyPairFiles kp;
  const std::string stem = root + "/keys/" + record::cell_key_stem("Cell 1");
  ASSERT_TRUE(record::create_key_pair(stem + ".key.pem", stem + ".pub.pem", &kp, err)) << err;
  EXPECT_TRUE(record::load_cell_signing_key(root, "Cell 1", kp.fingerprint, "", err)) << err;
  EXPECT_TRUE(record::load_cell_signing_key(root, "Cell 1",
                                            "keys/" + record::cell_key_stem("Cell 1") + ".pub.pem", "", err))
      << err;
  EXPECT_TRUE(record::load_cell_signing_key(root, "Other", kp.fingerprint, stem + ".key.pem", err)) << err;
  EXPECT_FALSE(record::load_cell_signing_key(root, "Cell 1", "sha256:" + std::string(64, '0'), "", err));
  EXPECT_NE(err.find("but the cell file names"), std::string::npos) << err;
  EXPECT_FALSE(record::load_cell_signing_key(root, "No such cell", kp.fingerprint, "", err));
  fs::remove_all(root);
}

TEST(Keys, PrivateKeyOthersCanReadIsRefused) {
  const std::string dir = temp_dir("keymode");
  std::string err;
  ASSERT_TRUE(record::create_key_pair(dir + "/k.key.pem", dir + "/k.pub.pem", nullptr, err)) << err;
  ASSERT_EQ(::chmod((dir + "/k.key.pem").c_str(), 0644), 0);
  EXPECT_FALSE(record::SigningKey::load(dir + "/k.key.pem", err));
  EXPECT_NE(err.find("0644"), std::string::npos) << err;
  ASSERT_EQ(::chmod((dir + "/k.key.pem").c_str(), 0600), 0);
  EXPECT_TRUE(record::SigningKey::load(dir + "/k.key.pem", err)) << err;
  // A public key is not a private key, and garbage is neither.
  EXPECT_FALSE(record::SigningKey::load(dir + "/k.pub.pem", err));
  write(dir + "/junk.pem", "-----BEGIN PUBLIC KEY-----\nAAAA\n-----END PUBLIC KEY-----\n");
  EXPECT_FALSE(record::PublicKey::load(dir + "/junk.pem", err));
  fs::remove_all(dir);
}

TEST(Seal, CanonicalMessageCoversEverythingButTheSignature) {
  const json a = {{"format", "loadtrim-seal-1"}, {"b", 1}, {"a", "é"}, {"signature", "x"}};
  const json b = {{"a", "é"}, {"signature", "y"}, {"b", 1}, {"format", "loadtrim-seal-1"}};
  EXPECT_EQ(record::signed_message(a), record::signed_message(b));
  EXPECT_EQ(record::signed_message(a),
            "loadtrim-seal-1\n{\"a\":\"\\u00e9\",\"b\":1,\"format\":\"loadtrim-seal-1\"}");
  json c = a;
  c["b"] = 2;
  EXPECT_NE(record::signed_message(a), record::signed_message(c));
  EXPECT_EQ(record::signed_message(json::array()), "");
}

TEST(Seal, SignedSealVerifiesAgainstTheCellKeyOnly) {
  const std::string dir = temp_dir("seal");
  const std::string f = make_folder(dir);
  // Before the seal: intact, not finished.
  EXPECT_EQ(record::verify_folder(f).outcome, record::Outcome::not_finished);
  std::string err;
  ASSERT_TRUE(record::create_key_pair(dir + "/cell.key.pem", dir + "/cell.pub.pem", nullptr, err)) << err;
  const auto key = record::SigningKey::load(dir + "/cell.key.pem", err);
  ASSERT_TRUE(key) << err;
  record::SealInfo info;
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"result", "accepted"}, {"accepted", true}}, &*key, ""},
                                  &info, err))
      << err;
  EXPECT_EQ(info.seq, 3u);
  EXPECT_EQ(info.files,
            4u);  // inputs/cell.toml, operator.log, summary.json, traces/run-001.csv; never events.jsonl
  EXPECT_EQ(info.signer, key->fingerprint());
  // A second seal is refused.
  EXPECT_FALSE(record::seal_folder(f, {"unit cell", json::object(), &*key, ""}, nullptr, err));
  EXPECT_NE(err.find("already sealed"), std::string::npos) << err;

  // The seal record: its fields, and its file list (sorted, folder-relative, without events.jsonl).
  std::vector<json> recs;
  ASSERT_TRUE(record::read_log(f + "/events.jsonl", &recs).ok);
  const json& s = recs.back();
  EXPECT_EQ(s["type"], "seal");
  EXPECT_EQ(s["chain_head"], s["prev"]);
  std::vector<std::string> paths;
  for (const auto& e : s["files"]) paths.push_back(e["path"]);
  EXPECT_EQ(paths, (std::vector<std::string>{"inputs/cell.toml", "operator.log", "summary.json",
                                             "traces/run-001.csv"}));
  EXPECT_EQ(info.files, paths.size());

  record::VerifyOptions trusted;
  trusted.cell_keys.push_back(key->public_key());
  auto v = record::verify_folder(f, trusted);
  EXPECT_EQ(v.outcome, record::Outcome::verified) << v.message;
  EXPECT_EQ(record::verify_exit_code(v.outcome), 0);
  ASSERT_TRUE(v.seal);
  EXPECT_TRUE(v.seal->signature_checked);
  // No trusted key: signed, but not checkable.
  v = record::verify_folder(f);
  EXPECT_EQ(v.outcome, record::Outcome::key_unknown) << v.message;
  EXPECT_EQ(record::verify_exit_code(v.outcome), 7);
  // The key found in a keys/ directory by the cell's name.
  const std::string keys = dir + "/keys";
  fs::create_directories(keys);
  fs::copy_file(dir + "/cell.pub.pem", keys + "/" + record::cell_key_stem("unit cell") + ".pub.pem");
  record::VerifyOptions by_dir;
  by_dir.keys_dir = keys;
  v = record::verify_folder(f, by_dir);
  EXPECT_EQ(v.outcome, record::Outcome::verified) << v.message;
  // Another key registered for this cell: the seal was not made with the cell's key.
  ASSERT_TRUE(record::create_key_pair(dir + "/other.key.pem", dir + "/other.pub.pem", nullptr, err)) << err;
  record::VerifyOptions wrong;
  wrong.cell_keys.push_back(*record::PublicKey::load(dir + "/other.pub.pem", err));
  v = record::verify_folder(f, wrong);
  EXPECT_EQ(v.outcome, record::Outcome::broken) << v.message;
  EXPECT_NE(v.message.find("not the cell's key"), std::string::npos) << v.message;
  EXPECT_EQ(v.record, 3);
  // A derived file (a report) may be added to a sealed folder; nothing else may.
  write(f + "/report.html", "<html></html>");
  EXPECT_EQ(record::verify_folder(f, trusted).outcome, record::Outcome::verified);
  write(f + "/notes.txt", "added later");
  v = record::verify_folder(f, trusted);
  EXPECT_EQ(v.outcome, record::Outcome::broken);
  EXPECT_EQ(v.file, "notes.txt");
  fs::remove_all(dir);
}

TEST(Seal, UnsignedSealHasItsOwnOutcome) {
  const std::string dir = temp_dir("unsigned");
  const std::string f = make_folder(dir);
  std::string err;
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"accepted", true}}, nullptr, ""}, nullptr, err)) << err;
  const auto v = record::verify_folder(f);
  EXPECT_EQ(v.outcome, record::Outcome::unsigned_seal) << v.message;
  EXPECT_EQ(record::verify_exit_code(v.outcome), 7);
  EXPECT_TRUE(v.intact());
  EXPECT_FALSE(v.ok());
  fs::remove_all(dir);
}

TEST(Seal, SealedResultMustAgreeWithSummary) {
  const std::string dir = temp_dir("summary");
  const std::string f = make_folder(dir);
  const std::string before = slurp(f + "/events.jsonl");
  std::string err;
  // The summary on disk says accepted: a seal claiming otherwise is not written.
  EXPECT_FALSE(record::seal_folder(f, {"unit cell", {{"accepted", false}}, nullptr, ""}, nullptr, err));
  EXPECT_NE(err.find("summary.json disagrees with the sealed result at \"accepted\""), std::string::npos)
      << err;
  EXPECT_EQ(slurp(f + "/events.jsonl"), before);
  EXPECT_FALSE(record::seal_folder(f, {"unit cell", json::array({1}), nullptr, ""}, nullptr, err));
  // A subset that agrees is fine.
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"accepted", true}, {"coastdowns", 1}}, nullptr, ""},
                                  nullptr, err))
      << err;
  fs::remove_all(dir);
}

TEST(Seal, BrokenFolderIsNotSealed) {
  const std::string dir = temp_dir("noseal");
  const std::string f = make_folder(dir);
  write(f + "/traces/run-001.csv", "changed");
  const std::string before = slurp(f + "/events.jsonl");
  std::string err;
  EXPECT_FALSE(record::seal_folder(f, {"unit cell", json::object(), nullptr, ""}, nullptr, err));
  EXPECT_NE(err.find("traces/run-001.csv"), std::string::npos) << err;
  EXPECT_EQ(slurp(f + "/events.jsonl"), before);
  fs::remove_all(dir);
}

TEST(Approval, SignedByTheReviewerAndBoundToThisSeal) {
  const std::string dir = temp_dir("approve");
  const std::string f = make_folder(dir);
  std::string err;
  ASSERT_TRUE(record::create_key_pair(dir + "/cell.key.pem", dir + "/cell.pub.pem", nullptr, err)) << err;
  ASSERT_TRUE(record::create_key_pair(dir + "/rev.key.pem", dir + "/rev.pub.pem", nullptr, err)) << err;
  const auto cell = record::SigningKey::load(dir + "/cell.key.pem", err);
  const auto rev = record::SigningKey::load(dir + "/rev.key.pem", err);
  ASSERT_TRUE(cell && rev);
  // Not sealed yet: nothing to approve.
  EXPECT_FALSE(record::approve_folder(f, {"R. Viewer", "fit for use", &*rev, ""}, nullptr, err));
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"accepted", true}}, &*cell, ""}, nullptr, err)) << err;
  record::ApprovalInfo ai;
  ASSERT_TRUE(record::approve_folder(f, {"R. Viewer", "reviewed; fit for use", &*rev, ""}, &ai, err)) << err;
  EXPECT_EQ(ai.seq, 4u);
  record::VerifyOptions o;
  o.cell_keys.push_back(cell->public_key());
  auto v = record::verify_folder(f, o);
  EXPECT_EQ(v.outcome, record::Outcome::key_unknown) << "reviewer key not given: " << v.message;
  ASSERT_EQ(v.approvals.size(), 1u);
  EXPECT_FALSE(v.approvals[0].signature_checked);
  o.reviewer_keys.push_back(rev->public_key());
  v = record::verify_folder(f, o);
  EXPECT_EQ(v.outcome, record::Outcome::verified) << v.message;
  ASSERT_EQ(v.approvals.size(), 1u);
  EXPECT_TRUE(v.approvals[0].signature_checked);
  EXPECT_EQ(v.approvals[0].reviewer, "R. Viewer");
  EXPECT_EQ(v.approvals[0].statement, "reviewed; fit for use");
  // Registered under the reviewer's name in keys/: found there.
  fs::create_directories(dir + "/keys");
  fs::copy_file(dir + "/rev.pub.pem", dir + "/keys/" + record::reviewer_key_stem("R. Viewer") + ".pub.pem");
  record::VerifyOptions by_dir;
  by_dir.cell_keys.push_back(cell->public_key());
  by_dir.keys_dir = dir + "/keys";
  EXPECT_EQ(record::verify_folder(f, by_dir).outcome, record::Outcome::verified);
  fs::remove_all(dir);
}

namespace {
// `levels` arrays, one inside the other, as text (made as text: the JSON library's serialiser recurses).
std::string nested_arrays(std::size_t levels) {
  return std::string(levels, '[') + std::string(levels, ']');
}
// A log of one record whose member "x" is `x`, with the seq and prev a first record has.
std::string one_record_log(const std::string& x) {
  return "{\"prev\":\"" + std::string(64, '0') + "\",\"seq\":0,\"type\":\"t\",\"utc\":\"u\",\"x\":" + x +
         "}\n";
}
}  // namespace

// docs/records.md, "The chain": a record line nests at most 64 arrays and objects; a deeper one makes the
// folder broken, named by record and file (exit 5), and is never a crash. In-process on purpose: verify used
// to serialise the seal's line with the JSON library's recursive dump before checking its signature, and a
// "result" nested 100,000 deep overflowed the stack (SIGSEGV), which ends this test binary: that is this test
// failing. The limit itself: 64 levels is a record, 65 is not, and brackets inside a string are not nesting.
TEST(Verify, ARecordNestedTooDeepIsBrokenNeverACrash) {
  const std::string dir = temp_dir("deep");
  const std::string f = make_folder(dir);
  std::string err;
  ASSERT_TRUE(record::create_key_pair(dir + "/cell.key.pem", dir + "/cell.pub.pem", nullptr, err)) << err;
  const auto key = record::SigningKey::load(dir + "/cell.key.pem", err);
  ASSERT_TRUE(key) << err;
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"accepted", true}}, &*key, ""}, nullptr, err)) << err;
  // The seal's "result" given a member nested 100,000 arrays deep; the seal is the last line, so no link
  // changes.
  const std::string text = slurp(f + "/events.jsonl");
  const std::size_t start = text.rfind('\n', text.size() - 2) + 1;
  std::string seal = text.substr(start, text.size() - 1 - start);
  const std::size_t at = seal.find("\"result\":{");
  ASSERT_NE(at, std::string::npos) << seal;
  seal.insert(at + 10, "\"deep\":" + nested_arrays(100000) + ",");
  write(f + "/events.jsonl", text.substr(0, start) + seal + "\n");
  record::VerifyOptions trusted;
  trusted.cell_keys.push_back(key->public_key());
  const record::FolderVerdict v = record::verify_folder(f, trusted);
  EXPECT_EQ(v.outcome, record::Outcome::broken) << v.message;
  EXPECT_EQ(record::verify_exit_code(v.outcome), 5);
  EXPECT_EQ(v.record, 3);
  EXPECT_EQ(v.file, "events.jsonl");
  EXPECT_NE(v.message.find("record 3 nests arrays and objects deeper than 64 levels"), std::string::npos)
      << v.message;
  // An approval (`loadtrim approve`, `resume` likewise) is refused the same way.
  EXPECT_FALSE(record::approve_folder(f, {"R. Viewer", "fit for use", &*key, ""}, nullptr, err));
  EXPECT_NE(err.find("it is broken: record 3 nests arrays and objects deeper than 64"), std::string::npos)
      << err;
  // Every log is read by read_log / parse_log (events.jsonl, the cell log): the limit and the strings.
  write(dir + "/64.jsonl", one_record_log(nested_arrays(63)));  // the record's own object and 63 arrays
  EXPECT_TRUE(record::read_log(dir + "/64.jsonl", nullptr).ok);
  write(dir + "/65.jsonl", one_record_log(nested_arrays(64)));
  const record::VerifyResult r65 = record::read_log(dir + "/65.jsonl", nullptr);
  EXPECT_FALSE(r65.ok);
  EXPECT_EQ(r65.first_bad_record, 0);
  EXPECT_NE(r65.message.find("record 0 nests arrays and objects deeper than 64 levels"), std::string::npos)
      << r65.message;
  write(dir + "/strings.jsonl", one_record_log("\"" + std::string(100000, '[') + "\\\"{[\""));
  EXPECT_TRUE(record::read_log(dir + "/strings.jsonl", nullptr).ok);
  fs::remove_all(dir);
}

TEST(Inside, PathsThatLeaveTheFolderAreRefused) {
  for (const char* bad : {"", "/etc/hostname", "../x", "a/../../x", "a//b", "./a", "a/.", "a\\b", "..", "a/"})
    EXPECT_FALSE(record::is_safe_relative_path(bad)) << bad;
  for (const char* good : {"summary.json", "traces/run-001.csv", "inputs/cell.toml", "a..b", ".hidden"})
    EXPECT_TRUE(record::is_safe_relative_path(good)) << good;
  const std::string dir = temp_dir("inside");
  fs::create_directories(dir + "/f/sub");
  write(dir + "/outside.txt", "secret");
  write(dir + "/f/sub/in.txt", "inside");
  fs::create_symlink(dir + "/outside.txt", dir + "/f/link.txt");
  fs::create_directory_symlink(dir, dir + "/f/linkdir");
  ASSERT_EQ(::mkfifo((dir + "/f/pipe").c_str(), 0600), 0);
  EXPECT_EQ(record::read_inside(dir + "/f", "sub/in.txt").content, "inside");
  EXPECT_EQ(record::read_inside(dir + "/f", "../outside.txt").status, record::InsideStatus::unsafe);
  EXPECT_EQ(record::read_inside(dir + "/f", "link.txt").status, record::InsideStatus::unsafe);
  EXPECT_EQ(record::read_inside(dir + "/f", "linkdir/outside.txt").status, record::InsideStatus::unsafe);
  // A FIFO is refused before any open(2): a blocking open would hang here (no writer), so returning at all
  // shows it.
  const auto p = record::read_inside(dir + "/f", "pipe");
  EXPECT_EQ(p.status, record::InsideStatus::unsafe);
  EXPECT_NE(p.error.find("FIFO"), std::string::npos) << p.error;
  EXPECT_EQ(record::read_inside(dir + "/f", "nothing.txt").status, record::InsideStatus::missing);
  const auto l = record::list_inside(dir + "/f");
  EXPECT_FALSE(l.ok);
  EXPECT_FALSE(l.offending.empty());
  fs::remove(dir + "/f/link.txt");
  fs::remove(dir + "/f/linkdir");
  fs::remove(dir + "/f/pipe");
  const auto l2 = record::list_inside(dir + "/f");
  ASSERT_TRUE(l2.ok) << l2.error;
  EXPECT_EQ(l2.files, std::vector<std::string>{"sub/in.txt"});
  fs::remove_all(dir);
}

TEST(WriteDurable, FailuresLeaveNoTemporaryFile) {
  const std::string dir = temp_dir("durable");
  std::string err;
  // rename(2) onto a non-empty directory fails after the temporary file was written.
  fs::create_directories(dir + "/target/x");
  EXPECT_FALSE(record::write_durable(dir + "/target", "content", err));
  EXPECT_FALSE(fs::exists(dir + "/target.tmp")) << err;
  // write(2) fails with EFBIG past the file-size limit (a stand-in for a full disk).
  struct rlimit old {};
  ASSERT_EQ(::getrlimit(RLIMIT_FSIZE, &old), 0);
  const auto previous = ::signal(SIGXFSZ, SIG_IGN);
  struct rlimit small = old;
  small.rlim_cur = 16;
  ASSERT_EQ(::setrlimit(RLIMIT_FSIZE, &small), 0);
  const bool wrote = record::write_durable(dir + "/big.json", std::string(4096, 'x'), err);
  ::setrlimit(RLIMIT_FSIZE, &old);
  ::signal(SIGXFSZ, previous);
  EXPECT_FALSE(wrote);
  EXPECT_FALSE(fs::exists(dir + "/big.json.tmp")) << err;
  EXPECT_FALSE(fs::exists(dir + "/big.json"));
  fs::remove_all(dir);
}

// Two names that differ only in characters a file name cannot hold never share a key, a cell log or a history
// (docs/records.md, Keys); a name that is already safe keeps its spelling (existing keys stay where they
// are).
TEST(Seal, KeyStemsOfDifferentNamesNeverCollide) {
  EXPECT_EQ(record::cell_key_stem("cell-1"), "cell-cell-1");
  EXPECT_NE(record::cell_key_stem("sim cell (A)"), record::cell_key_stem("sim cell [A]"));
  EXPECT_NE(record::reviewer_key_stem("A. Name"), record::reviewer_key_stem("A_ Name"));
  // The suffix is the first 8 hex digits of SHA-256 of the name as written; the value is Python's
  // hashlib.sha256(b"a(b)c").hexdigest()[:8], computed outside the project.
  EXPECT_EQ(record::identity_name("abc"), "abc");
  EXPECT_EQ(record::identity_name("a(b)c"), "a_b_c-456e6469");
}

// record/inside.hpp, docs/records.md "Size limits": hashing streams the file in kHashChunkBytes pieces; a
// file larger than one piece (and not a multiple of it) hashes to what the one-shot hash of its content
// gives, as do the incremental hash fed in uneven pieces and sha256_file.
TEST(Inside, HashingAFileLargerThanTheReadBufferEqualsTheOneShotHash) {
  const std::string dir = temp_dir("hash-stream");
  std::string content(2 * record::kHashChunkBytes + 12345, '\0');
  for (std::size_t i = 0; i < content.size(); ++i) content[i] = static_cast<char>((i * 131 + i / 7) & 0xff);
  write(dir + "/big.csv", content);
  const std::string expected = record::sha256_hex(content);
  const record::InsideHash h = record::hash_inside(dir, "big.csv");
  ASSERT_EQ(h.status, record::InsideStatus::ok) << h.error;
  EXPECT_EQ(h.sha256, expected);
  EXPECT_EQ(h.bytes, content.size());
  EXPECT_EQ(record::sha256_file(dir + "/big.csv"), expected);
  record::Sha256 pieces;
  for (std::size_t at = 0, step = 1; at < content.size(); at += step, step = step * 3 + 1)
    pieces.update(content.data() + at, std::min(step, content.size() - at));
  EXPECT_EQ(pieces.hex(), expected);
  // The SHA-256 of "abc" (FIPS 180-2, appendix B.1).
  EXPECT_EQ(record::sha256_hex("abc"), "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
  fs::remove_all(dir);
}

#if !defined(__SANITIZE_ADDRESS__) && !defined(__SANITIZE_THREAD__)
#if defined(__has_feature)
#if __has_feature(address_sanitizer) || __has_feature(thread_sanitizer)
#define LOADTRIM_NO_ADDRESS_LIMIT 1
#endif
#endif
#else
#define LOADTRIM_NO_ADDRESS_LIMIT 1
#endif

// Hashing takes constant memory: a 768 MiB file (sparse) hashes with the address space limited to 256 MiB
// above what the process uses (reading it whole, as hash_inside once did, failed with std::bad_alloc). Not
// under the sanitizers, which reserve terabytes of address space of their own.
TEST(Inside, HashingAFileNeverHoldsItInMemory) {
#ifdef LOADTRIM_NO_ADDRESS_LIMIT
  GTEST_SKIP() << "address-space limit not usable under a sanitizer";
#else
  const std::string dir = temp_dir("hash-memory");
  const std::uint64_t size = std::uint64_t{768} << 20;
  {
    std::ofstream(dir + "/trace.csv");
    ASSERT_EQ(::truncate((dir + "/trace.csv").c_str(), static_cast<off_t>(size)), 0);
  }
  std::ifstream statm("/proc/self/statm");
  std::uint64_t pages = 0;
  statm >> pages;
  ASSERT_GT(pages, 0u);
  struct rlimit old {};
  ASSERT_EQ(::getrlimit(RLIMIT_AS, &old), 0);
  struct rlimit tight = old;
  tight.rlim_cur = pages * static_cast<std::uint64_t>(::sysconf(_SC_PAGESIZE)) + (std::uint64_t{256} << 20);
  ASSERT_EQ(::setrlimit(RLIMIT_AS, &tight), 0);
  record::InsideHash h;
  std::string thrown;
  try {
    h = record::hash_inside(dir, "trace.csv");
  } catch (const std::exception& e) {
    thrown = e.what();
  }
  ::setrlimit(RLIMIT_AS, &old);
  EXPECT_EQ(thrown, "");
  EXPECT_EQ(h.status, record::InsideStatus::ok) << h.error;
  EXPECT_EQ(h.bytes, size);
  fs::remove_all(dir);
#endif
}

// docs/records.md, "Size limits": a file read whole that is larger than kMaxRecordFileBytes (here a sealed
// folder's events.jsonl made sparse past it, nothing read) makes verify name the file and the limit (broken,
// exit 5), never a crash; read_inside and read_log refuse it the same way.
TEST(Verify, AFileLargerThanTheReadLimitIsBrokenNamingItAndTheLimit) {
  const std::string dir = temp_dir("too-large");
  const std::string f = make_folder(dir);
  record::SealInfo info;
  std::string err;
  ASSERT_TRUE(record::seal_folder(f, {"unit cell", {{"result", "accepted"}}, nullptr, ""}, &info, err))
      << err;
  ASSERT_EQ(record::verify_folder(f).outcome, record::Outcome::unsigned_seal);
  const std::string limit = std::to_string(record::kMaxRecordFileBytes);
  ASSERT_EQ(::truncate((f + "/events.jsonl").c_str(), static_cast<off_t>(record::kMaxRecordFileBytes + 1)),
            0);
  const record::FolderVerdict v = record::verify_folder(f);
  EXPECT_EQ(v.outcome, record::Outcome::broken);
  EXPECT_EQ(record::verify_exit_code(v.outcome), 5);
  EXPECT_EQ(v.file, "events.jsonl");
  EXPECT_NE(v.message.find("events.jsonl"), std::string::npos) << v.message;
  EXPECT_NE(v.message.find(limit), std::string::npos) << v.message;
  const record::InsideFile r = record::read_inside(f, "events.jsonl");
  EXPECT_EQ(r.status, record::InsideStatus::too_large);
  EXPECT_TRUE(r.content.empty());
  std::vector<json> recs;
  const record::VerifyResult l = record::read_log(f + "/events.jsonl", &recs);
  EXPECT_FALSE(l.ok);
  EXPECT_NE(l.message.find(limit), std::string::npos) << l.message;
  // A small limit shows the check on a file's own size.
  EXPECT_EQ(record::read_inside(f, "summary.json", 4).status, record::InsideStatus::too_large);
  EXPECT_EQ(record::read_inside(f, "summary.json").status, record::InsideStatus::ok);
  fs::remove_all(dir);
}
