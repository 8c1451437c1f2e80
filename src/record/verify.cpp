#include "record/verify.hpp"

#include <sys/stat.h>

#include <filesystem>
#include <set>

#include "record/data_root.hpp"
#include "record/event_log.hpp"
#include "record/inside.hpp"
#include "record/session_folder.hpp"

namespace loadtrim::record {

namespace fs = std::filesystem;
using nlohmann::json;

const char* to_string(Outcome o) {
  switch (o) {
    case Outcome::verified:
      return "verified";
    case Outcome::broken:
      return "broken";
    case Outcome::not_finished:
      return "not finished";
    case Outcome::unsigned_seal:
      return "sealed, not signed";
    case Outcome::key_unknown:
      return "signed, key unknown";
  }
  return "unknown";
}

int verify_exit_code(Outcome o) {
  switch (o) {
    case Outcome::verified:
      return kVerifyExitVerified;
    case Outcome::broken:
      return kVerifyExitBroken;
    case Outcome::not_finished:
      return kVerifyExitNotFinished;
    case Outcome::unsigned_seal:
    case Outcome::key_unknown:
      return kVerifyExitUnsigned;
  }
  return kVerifyExitBroken;
}

json FolderVerdict::to_json() const {
  json j = {{"outcome", record::to_string(outcome)},
            {"exit_code", verify_exit_code(outcome)},
            {"message", message},
            {"records", records},
            {"recorded_files", recorded_files},
            {"cell", cell},
            {"origin", origin},
            {"records_signed", records_signed},
            {"records_signature_checked", records_signature_checked},
            {"notes", notes},
            {"findings", findings}};
  if (!records_signer.empty()) j["records_signer"] = records_signer;
  if (record >= 0) j["record"] = record;
  if (!file.empty()) j["file"] = file;
  if (seal)
    j["seal"] = {{"seq", seal->seq},
                 {"utc", seal->utc},
                 {"cell", seal->cell},
                 {"chain_head", seal->chain_head},
                 {"seal_sha256", seal->seal_sha256},
                 {"signer", seal->signer},
                 {"signed", seal->is_signed},
                 {"signature_checked", seal->signature_checked},
                 {"key_source", seal->key_source},
                 {"files", seal->files}};
  json a = json::array();
  for (const auto& ap : approvals)
    a.push_back({{"seq", ap.seq},
                 {"utc", ap.utc},
                 {"reviewer", ap.reviewer},
                 {"statement", ap.statement},
                 {"signer", ap.signer},
                 {"signature_checked", ap.signature_checked},
                 {"key_source", ap.key_source}});
  j["approvals"] = a;
  return j;
}

namespace {

bool is_hex64(const json& j) {
  if (!j.is_string()) return false;
  const auto& s = j.get_ref<const std::string&>();
  if (s.size() != 64) return false;
  for (char c : s)
    if (!((c >= '0' && c <= '9') || (c >= 'a' && c <= 'f'))) return false;
  return true;
}

// Exactly these members, each a string unless listed in `other`.
std::string shape_problem(const json& r, const std::set<std::string>& members,
                          const std::set<std::string>& not_strings) {
  for (const auto& m : members) {
    if (!r.contains(m)) return "lacks \"" + m + "\"";
    if (!not_strings.count(m) && !r[m].is_string()) return "has a \"" + m + "\" that is not a string";
  }
  for (auto it = r.begin(); it != r.end(); ++it)
    if (!members.count(it.key())) return "has a member \"" + it.key() + "\" that does not belong in it";
  return "";
}

bool is_canonical(const LogLine& l) {
  try {
    return l.text == l.record.dump(-1, ' ', false, json::error_handler_t::replace);
  } catch (const std::exception&) {
    return false;
  }
}

struct CellLogEntry {
  bool consulted = false;  // the cell log exists and its chain is intact
  std::string path;
  bool found = false;
  std::uint64_t seq = 0;
  std::string utc, seal;
  std::uint64_t seal_seq = 0;
};

// A trusted public key: from the options (any cell / reviewer) or <keys_dir>/<stem>.pub.pem.
struct KeyLookup {
  const PublicKey* key = nullptr;  // matches the signer: a given key, or `loaded`
  std::optional<PublicKey> loaded;
  std::string known_other;  // a trusted key for this name exists, and it is not the signer's
  std::string source, looked_at;
  KeyLookup() = default;
  // `key` may point into this very object: a copy points into the copy.
  KeyLookup(const KeyLookup& o) { *this = o; }
  KeyLookup& operator=(const KeyLookup& o) {
    if (this == &o) return *this;
    loaded = o.loaded;
    known_other = o.known_other;
    source = o.source;
    looked_at = o.looked_at;
    key = (o.key && o.loaded && o.key == &*o.loaded) ? &*loaded : o.key;
    return *this;
  }
};

KeyLookup find_key(const std::vector<PublicKey>& given, const std::string& keys_dir, const std::string& stem,
                   const std::string& signer, std::vector<std::string>& notes) {
  KeyLookup k;
  for (const auto& g : given)
    if (g.fingerprint() == signer) {
      k.key = &g;
      k.source = "a key given to verify";
      return k;
    }
  if (!given.empty()) {
    k.known_other = given.front().fingerprint();
    k.source = "the key given to verify";
  }
  if (!keys_dir.empty()) {
    const std::string path = (fs::path(keys_dir) / (stem + ".pub.pem")).string();
    k.looked_at = path;
    std::error_code ec;
    if (fs::exists(path, ec)) {
      std::string err;
      k.loaded = PublicKey::load(path, err);
      if (!k.loaded) {
        notes.push_back("the trusted key " + path + " cannot be read: " + err);
      } else if (k.loaded->fingerprint() == signer) {
        k.key = &*k.loaded;
        k.source = path;
        k.known_other.clear();
      } else if (k.known_other.empty()) {
        k.known_other = k.loaded->fingerprint();
        k.source = path;
      }
    }
  }
  return k;
}

CellLogEntry find_in_cell_log(const std::string& checks_root, const std::string& cell,
                              const std::string& origin, std::vector<std::string>& notes) {
  CellLogEntry e;
  if (checks_root.empty() || cell.empty()) return e;
  const std::string path = (fs::path(checks_root) / identity_name(cell) / "cell-log.jsonl").string();
  std::error_code ec;
  if (!fs::exists(path, ec)) {
    notes.push_back("no cell log at " + path + "; not consulted");
    return e;
  }
  std::vector<json> recs;
  const VerifyResult v = read_log(path, &recs);
  if (!v.ok) {
    notes.push_back("the cell log " + path + " is broken (" + v.message + "); not consulted");
    return e;
  }
  e.consulted = true;
  e.path = path;
  for (const auto& r : recs)
    if (r.value("type", "") == "seal" && r.value("origin", "") == origin) {
      e.found = true;
      e.seq = r.value("seq", std::uint64_t{0});
      e.utc = r.value("utc", "");
      e.seal = r.value("seal", "");
      e.seal_seq = r.value("seal_seq", std::uint64_t{0});
    }
  return e;
}

}  // namespace

FolderVerdict verify_folder(const std::string& folder, const VerifyOptions& opt) {
  return verify_folder(folder, opt, nullptr);
}

FolderVerdict verify_folder(const std::string& folder, const VerifyOptions& opt,
                            std::vector<nlohmann::json>* records) {
  FolderVerdict v;
  auto broken = [&v](const std::string& msg, std::int64_t rec = -1, const std::string& file = "") {
    v.outcome = Outcome::broken;
    v.findings.clear();  // what an intact folder would need; a broken one is the finding
    v.cell_log_lacks_seal = false;
    v.message = msg;
    v.record = rec;
    v.file = file;
    return v;
  };
  try {
    // 1. The log and its chain.
    const InsideFile ev = read_inside(folder, "events.jsonl");
    if (ev.status != InsideStatus::ok)
      return broken(
          ev.status == InsideStatus::missing ? "events.jsonl is missing (" + ev.error + ")" : ev.error, -1,
          "events.jsonl");
    bool torn = false;
    std::vector<LogLine> lines;
    const VerifyResult chain = parse_log(ev.content, &lines, &torn);
    if (records) {
      records->clear();
      for (const auto& l : lines) records->push_back(l.record);
    }
    v.records = chain.records;
    v.notes = chain.notes;
    if (!chain.ok) return broken(chain.message, chain.first_bad_record, "events.jsonl");
    if (lines.empty()) return broken("events.jsonl holds no record", -1, "events.jsonl");
    v.origin = lines.front().sha256;
    if (lines.front().record.contains("cell") && lines.front().record["cell"].is_string())
      v.cell = lines.front().record["cell"];

    // 1a. Record signatures (the hash chain alone shows accidents; a signature shows who wrote the record).
    {
      const bool first_signed = lines.front().record.contains("sig");
      v.records_signed = first_signed;
      KeyLookup k;
      if (first_signed) {
        const json& r0 = lines.front().record;
        if (!r0.contains("record_signer") || !r0["record_signer"].is_string())
          return broken("record 0 is signed but does not name its signer (record_signer)", 0, "events.jsonl");
        v.records_signer = r0["record_signer"];
        k = find_key(opt.cell_keys, opt.keys_dir, cell_key_stem(v.cell), v.records_signer, v.notes);
        if (!k.key && !k.known_other.empty())
          return broken("the records are signed by " + v.records_signer + ", which is not the cell's key " +
                            k.known_other + " (" + k.source + ")",
                        0, "events.jsonl");
        if (!k.key)
          v.notes.push_back("record signatures not checked: no trusted key of cell \"" + v.cell + "\"" +
                            (k.looked_at.empty() ? std::string() : " at " + k.looked_at));
      }
      for (std::size_t i = 0; i < lines.size(); ++i) {
        const std::string type = lines[i].record.value("type", "");
        if (type == "seal" || type == "approval") break;  // they carry their own signatures
        const bool has = lines[i].record.contains("sig");
        const std::string at = "record " + std::to_string(i);
        if (has != first_signed)
          return broken(at + (has ? " is signed, but record 0 is not" : " is not signed, but record 0 is") +
                            ": records were added or replaced without the cell's key",
                        static_cast<std::int64_t>(i), "events.jsonl");
        if (!has || !k.key) continue;
        std::string text, sig;
        if (!split_record_signature(lines[i].text, text, sig) ||
            !k.key->verify(std::string(kRecordSigDomain) + text, sig))
          return broken(at + "'s signature does not verify with the cell's key " + k.key->fingerprint() +
                            ": the record was altered",
                        static_cast<std::int64_t>(i), "events.jsonl");
      }
      v.records_signature_checked = first_signed && k.key;
    }

    // 2. Every file any record holds a hash of.
    for (const auto& l : lines) {
      const json& r = l.record;
      if (!r.contains("files")) continue;
      const auto seq = static_cast<std::int64_t>(r["seq"].get<std::uint64_t>());
      const std::string at = "record " + std::to_string(seq);
      if (!r["files"].is_array()) return broken(at + ": its \"files\" member is not a list", seq);
      std::size_t k = 0;
      for (const auto& f : r["files"]) {
        if (!f.is_object() || !f.contains("path") || !f["path"].is_string() || !f.contains("sha256") ||
            !is_hex64(f["sha256"]))
          return broken(at + ": files entry " + std::to_string(k) + " lacks a path or a SHA-256", seq);
        const std::string rel = f["path"];
        std::string why;
        if (!is_safe_relative_path(rel, &why))
          return broken(at + " names \"" + rel + "\", which is not a path inside the folder (" + why +
                            "); it was not opened",
                        seq, rel);
        const InsideHash h = hash_inside(folder, rel);
        if (h.status == InsideStatus::missing)
          return broken(rel + " recorded in " + at + " is missing", seq, rel);
        if (h.status != InsideStatus::ok) return broken(h.error + " (recorded in " + at + ")", seq, rel);
        if (h.sha256 != f["sha256"].get<std::string>())
          return broken(rel + " does not match the SHA-256 recorded in " + at + ": the file was altered", seq,
                        rel);
        ++v.recorded_files;
        ++k;
      }
    }

    // 3. Where the seal is, and what follows it.
    std::int64_t seal_at = -1;
    for (std::size_t i = 0; i < lines.size(); ++i) {
      const std::string type = lines[i].record.value("type", "");
      const auto seq = static_cast<std::int64_t>(i);
      if (type == "seal") {
        if (seal_at >= 0)
          return broken("record " + std::to_string(i) + " is a second seal (the first is record " +
                            std::to_string(seal_at) + ")",
                        seq);
        seal_at = seq;
      } else if (type == "approval" && seal_at < 0) {
        return broken("record " + std::to_string(i) + " is an approval, but no seal precedes it", seq);
      } else if (type != "approval" && seal_at >= 0) {
        return broken("record " + std::to_string(i) + " (" + (type.empty() ? "no type" : type) +
                          ") follows the seal (record " + std::to_string(seal_at) +
                          "): nothing but approvals may be added to a sealed folder",
                      seq);
      }
    }
    if (seal_at >= 0) {
      const auto& s = lines[static_cast<std::size_t>(seal_at)].record;
      if (s.contains("cell") && s["cell"].is_string()) v.cell = s["cell"];
    }
    const std::string summary_counts = std::to_string(v.records) + " records, chain intact, " +
                                       std::to_string(v.recorded_files) + " recorded files match";
    const CellLogEntry logged = find_in_cell_log(opt.checks_root, v.cell, v.origin, v.notes);

    if (seal_at < 0) {
      if (logged.found)
        return broken("the folder was cut back: the cell log (record " + std::to_string(logged.seq) + ", " +
                          logged.utc + ") records it sealed at record " + std::to_string(logged.seal_seq) +
                          ", but it now ends at record " + std::to_string(v.records - 1) + " with no seal",
                      static_cast<std::int64_t>(v.records - 1), "events.jsonl");
      if (logged.consulted) v.notes.push_back("the cell log " + logged.path + " has no seal for this folder");
      // No link, FIFO or device anywhere in it, sealed or not (a resumed session would otherwise run to the
      // end before the seal refuses it).
      const FolderListing listing = list_inside(folder);
      if (!listing.ok) return broken(listing.error, -1, listing.offending);
      // A cell with a trusted key signs its records: an unsigned unfinished folder of such a cell was
      // re-chained by someone without the key (or started before the cell had one: either way, not
      // resumable).
      if (!v.records_signed && !opt.keys_dir.empty()) {
        std::error_code ec;
        const std::string pub = (fs::path(opt.keys_dir) / (cell_key_stem(v.cell) + ".pub.pem")).string();
        if (!v.cell.empty() && fs::exists(pub, ec))
          return broken(
              "the records are not signed, but cell \"" + v.cell + "\" has a key (" + pub +
                  "): the folder was re-chained without the key, or started before the cell had one",
              0, "events.jsonl");
      }
      v.outcome = Outcome::not_finished;
      v.message = summary_counts + "; no seal: the session or check did not finish (or is still running)";
      return v;
    }
    if (torn)
      return broken("events.jsonl ends in a partial line after the seal: the sealed folder was written to",
                    static_cast<std::int64_t>(v.records), "events.jsonl");

    // 4. The seal's form and coverage.
    const LogLine& sl = lines[static_cast<std::size_t>(seal_at)];
    const json& s = sl.record;
    const std::string sat = "the seal (record " + std::to_string(seal_at) + ")";
    if (const std::string p = shape_problem(s,
                                            {"seq", "utc", "type", "prev", "format", "chain_head", "cell",
                                             "files", "result", "signer", "signature"},
                                            {"seq", "files", "result"});
        !p.empty())
      return broken(sat + " " + p, seal_at);
    if (s["format"] != kSealFormat)
      return broken(sat + " has an unknown format \"" + s["format"].get<std::string>() + "\"", seal_at);
    if (!is_canonical(sl))
      return broken(sat + " is not in the form loadtrim writes: its line was edited", seal_at);
    if (s["chain_head"] != s["prev"])
      return broken(sat + " names a chain head that is not the record before it", seal_at);
    if (!s["result"].is_object()) return broken(sat + " has a result that is not an object", seal_at);
    SealView sv;
    sv.seq = static_cast<std::uint64_t>(seal_at);
    sv.utc = s["utc"];
    sv.cell = s["cell"];
    sv.chain_head = s["chain_head"];
    sv.seal_sha256 = sl.sha256;
    sv.signer = s["signer"];
    sv.result = s["result"];
    std::set<std::string> covered;
    std::string last;
    for (const auto& f : s["files"]) {
      if (!f.is_object() || f.size() != 3 || !f.contains("bytes") || !f["bytes"].is_number_unsigned())
        return broken(sat + " has a malformed files entry", seal_at);
      const std::string rel = f["path"];
      if (!last.empty() && !(last < rel))
        return broken(sat + " lists its files out of order or twice (" + rel + ")", seal_at, rel);
      if (rel == "events.jsonl" || is_derived_file(rel))
        return broken(sat + " lists " + rel + ", which a seal never covers", seal_at, rel);
      last = rel;
      covered.insert(rel);
    }
    sv.files = covered.size();
    const FolderListing listing = list_inside(folder);
    if (!listing.ok) return broken(listing.error, -1, listing.offending);
    for (const auto& rel : listing.files) {
      if (rel == "events.jsonl" || is_derived_file(rel)) continue;
      if (!covered.count(rel))
        return broken(rel + " is not covered by " + sat + ": it was added after the folder was sealed",
                      seal_at, rel);
    }
    // Every covered file was hashed in step 2 (the seal's list is a "files" list), so a missing one was named
    // there.

    // The summary on disk agrees with what was sealed.
    if (!covered.count("summary.json") && !covered.count("result.json"))
      v.notes.push_back("no summary.json or result.json to compare with the sealed result");
    std::string summary_file;
    if (const std::string d = result_disagreement(folder, sv.result, &summary_file); !d.empty())
      return broken(d + " (" + sat + ")", seal_at, summary_file);

    // The cell log knows this very seal.
    if (logged.found && logged.seal != sv.seal_sha256)
      return broken(sat + " is not the seal the cell log recorded for this folder (cell log record " +
                        std::to_string(logged.seq) + ", " + logged.utc + ", seal at record " +
                        std::to_string(logged.seal_seq) +
                        "): the folder was cut back and sealed again, or its seal replaced",
                    seal_at, "events.jsonl");
    if (logged.found)
      v.notes.push_back("the cell log (record " + std::to_string(logged.seq) + ") records this seal");
    // A sealed folder its cell log does not know: a crash between the seal and its cell-log entry, or the
    // entry was removed. The folder itself may be fine, but a cut-back of it would no longer be seen (it
    // would read as not finished): a finding, not a note. Verify only reads; resume adds the entry.
    if (logged.consulted && !logged.found) {
      v.cell_log_lacks_seal = true;
      v.findings.push_back("the cell log " + logged.path + " holds no seal for this folder (origin " +
                           v.origin +
                           "): a crash between the seal and its cell-log entry, or the entry was removed; "
                           "until it is there, a cut-back of this folder reads as not finished instead of "
                           "broken. `loadtrim resume " +
                           folder + "` adds it when the seal's signature checks with the cell's trusted key");
    }

    // 5. The seal's signature.
    const std::string sig = s["signature"];
    sv.is_signed = !sv.signer.empty() || !sig.empty();
    if (sv.is_signed && (sv.signer.rfind("sha256:", 0) != 0 || sig.size() != 128))
      return broken(sat + " has a malformed signer or signature", seal_at);
    // The session's own cell file (sealed, so as it was at the start) may name the cell's key.
    if (covered.count("inputs/cell.toml")) {
      const InsideFile cf = read_inside(folder, "inputs/cell.toml");
      if (cf.status != InsideStatus::ok) return broken(cf.error, seal_at, "inputs/cell.toml");
      std::string terr;
      const auto named = cf.status == InsideStatus::ok
                             ? toml_string_value(cf.content, "records", "public_key", &terr)
                             : std::nullopt;
      if (named && named->rfind("sha256:", 0) == 0) {
        if (!sv.is_signed)
          return broken(
              sat + " is unsigned, yet the session's cell file (inputs/cell.toml) names the key " + *named +
                  ": a session with a key always signs, so this seal was made without the cell's key",
              seal_at, "inputs/cell.toml");
        if (*named != sv.signer)
          return broken(sat + " is signed by " + sv.signer +
                            ", but the session's cell file (inputs/cell.toml) names the key " + *named,
                        seal_at, "inputs/cell.toml");
      }
    }
    bool unknown = false;
    std::string unknown_why;
    if (sv.is_signed) {
      KeyLookup k = find_key(opt.cell_keys, opt.keys_dir, cell_key_stem(sv.cell), sv.signer, v.notes);
      if (k.key) {
        if (!k.key->verify(signed_message(s), sig))
          return broken("the signature of " + sat + " does not verify with the cell's key " +
                            k.key->fingerprint() +
                            ": the seal (its chain head, file list or result) was changed",
                        seal_at);
        sv.signature_checked = true;
        sv.key_source = k.source;
      } else if (!k.known_other.empty()) {
        return broken(sat + " is signed by " + sv.signer + ", which is not the cell's key " + k.known_other +
                          " (" + k.source + "): it was not made with the cell's private key",
                      seal_at);
      } else {
        unknown = true;
        unknown_why = sat + " is signed by " + sv.signer + ", but no public key of cell \"" + sv.cell +
                      "\" is known" +
                      (k.looked_at.empty() ? std::string() : " (looked for " + k.looked_at + ")") +
                      "; give it with --public-key";
      }
    }
    v.seal = sv;

    // 6. Approvals.
    for (std::size_t i = static_cast<std::size_t>(seal_at) + 1; i < lines.size(); ++i) {
      const json& a = lines[i].record;
      const auto seq = static_cast<std::int64_t>(i);
      const std::string aat = "the approval in record " + std::to_string(i);
      if (const std::string p = shape_problem(a,
                                              {"seq", "utc", "type", "prev", "format", "reviewer",
                                               "statement", "seal", "chain_head", "signer", "signature"},
                                              {"seq"});
          !p.empty())
        return broken(aat + " " + p, seq);
      if (a["format"] != kApprovalFormat) return broken(aat + " has an unknown format", seq);
      if (!is_canonical(lines[i]))
        return broken(aat + " is not in the form loadtrim writes: its line was edited", seq);
      if (a["seal"] != sv.seal_sha256 || a["chain_head"] != sv.chain_head)
        return broken(
            aat + " approves another seal, not this folder's (record " + std::to_string(seal_at) + ")", seq);
      ApprovalView av;
      av.seq = i;
      av.utc = a["utc"];
      av.reviewer = a["reviewer"];
      av.statement = a["statement"];
      av.signer = a["signer"];
      KeyLookup k =
          find_key(opt.reviewer_keys, opt.keys_dir, reviewer_key_stem(av.reviewer), av.signer, v.notes);
      if (k.key) {
        if (!k.key->verify(signed_message(a), a["signature"].get<std::string>()))
          return broken("the signature of " + aat + " (" + av.reviewer +
                            ") does not verify with the reviewer's key " + k.key->fingerprint(),
                        seq);
        av.signature_checked = true;
        av.key_source = k.source;
      } else if (!k.known_other.empty()) {
        return broken(aat + " is signed by " + av.signer + ", which is not " + av.reviewer + "'s key " +
                          k.known_other + " (" + k.source + ")",
                      seq);
      } else if (!unknown) {
        unknown = true;
        unknown_why = aat + " (" + av.reviewer + ") is signed by " + av.signer +
                      ", but no public key of that reviewer is known" +
                      (k.looked_at.empty() ? std::string() : " (looked for " + k.looked_at + ")");
      }
      v.approvals.push_back(av);
    }
    v.seal = sv;

    const std::string sealed = summary_counts + "; sealed at record " + std::to_string(seal_at) +
                               " covering " + std::to_string(sv.files) + " files";
    if (!sv.is_signed) {
      v.outcome = Outcome::unsigned_seal;
      v.message = sealed +
                  ", but the seal is not signed (no cell key was configured): anyone able to write the "
                  "folder could have made it";
      std::error_code ec;
      const std::string cell_key =
          opt.keys_dir.empty() ? ""
                               : (fs::path(opt.keys_dir) / (cell_key_stem(sv.cell) + ".pub.pem")).string();
      if (!cell_key.empty() && fs::exists(cell_key, ec))
        v.message +=
            "; the cell has a key now (" + cell_key + "): a folder sealed after it was made would be signed";
    } else if (unknown) {
      v.outcome = Outcome::key_unknown;
      v.message = sealed + "; " + unknown_why;
    } else {
      v.outcome = Outcome::verified;
      v.message = sealed + ", signed by the cell's key " + sv.signer;
      if (!v.approvals.empty())
        v.message += "; " + std::to_string(v.approvals.size()) + " approval(s) verified";
    }
    return v;
  } catch (const std::exception& e) {
    // Every access above is checked; this is a last line so that a malformed folder is never a crash.
    return broken(std::string("the folder could not be read as a record folder: ") + e.what());
  }
}

std::string result_disagreement(const std::string& folder, const json& result, std::string* file) {
  std::string name = "summary.json";
  InsideFile sf = read_inside(folder, name);
  if (sf.status == InsideStatus::missing) {
    name = "result.json";
    sf = read_inside(folder, name);
  }
  if (sf.status == InsideStatus::missing || !result.is_object() || result.empty()) return "";
  if (file) *file = name;
  if (sf.status != InsideStatus::ok) return sf.error;
  bool too_deep = false;
  const json sj = parse_record_json(sf.content, &too_deep);
  if (too_deep)
    return name + " nests arrays and objects deeper than " + std::to_string(kMaxRecordDepth) + " levels";
  if (!sj.is_object()) return name + " is not a JSON object";
  for (auto it = result.begin(); it != result.end(); ++it)
    if (!sj.contains(it.key()) || sj[it.key()] != it.value())
      return name + " disagrees with the sealed result at \"" + it.key() + "\"";
  return "";
}

}  // namespace loadtrim::record
