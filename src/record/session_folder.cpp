#include "record/session_folder.hpp"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <charconv>
#include <chrono>
#include <cstring>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <stdexcept>

#include "record/inside.hpp"
#include "record/sha256.hpp"

namespace loadtrim::record {

namespace fs = std::filesystem;

std::string utc_now() {
  const auto now = std::chrono::system_clock::now();
  const std::time_t t = std::chrono::system_clock::to_time_t(now);
  const auto ms =
      std::chrono::duration_cast<std::chrono::milliseconds>(now.time_since_epoch()).count() % 1000;
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[40];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%S", &tm);
  char out[48];
  std::snprintf(out, sizeof out, "%s.%03dZ", buf, static_cast<int>(ms));
  return out;
}

std::string utc_compact_now() {
  const std::time_t t = std::chrono::system_clock::to_time_t(std::chrono::system_clock::now());
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y%m%dT%H%M%SZ", &tm);
  return buf;
}

std::string safe_name(const std::string& s) {
  std::string out;
  for (char c : s)
    out += (std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '_' || c == '.') ? c : '_';
  return out.empty() ? "unnamed" : out;
}

std::string identity_name(const std::string& s) {
  const std::string safe = safe_name(s);
  return safe == s ? safe : safe + "-" + sha256_hex(s).substr(0, 8);
}

bool sync_directory(const std::string& dir, std::string& error) {
  const std::string d = dir.empty() ? "." : dir;
  const int dfd = ::open(d.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dfd < 0) {
    error = "cannot open the directory " + d + " to sync it: " + std::strerror(errno);
    return false;
  }
  if (::fsync(dfd) != 0) {
    error = "cannot sync the directory " + d + ": " + std::strerror(errno);
    ::close(dfd);
    return false;
  }
  ::close(dfd);
  return true;
}

bool make_directories_durably(const std::string& dir, std::string& error) {
  fs::path p = fs::path(dir.empty() ? "." : dir).lexically_normal();
  if (p.filename().empty() && p != p.root_path()) p = p.parent_path();  // "a/b/" → "a/b"
  // The missing directories, innermost first.
  std::vector<fs::path> missing;
  std::error_code ec;
  for (fs::path q = p; !q.empty() && !fs::exists(q, ec); q = q.parent_path()) {
    missing.push_back(q);
    if (q == q.parent_path()) break;
  }
  for (auto it = missing.rbegin(); it != missing.rend(); ++it) {
    if (::mkdir(it->c_str(), 0755) != 0 && errno != EEXIST) {
      error = "cannot create " + it->string() + ": " + std::strerror(errno);
      return false;
    }
    if (!sync_directory(it->parent_path().string(), error)) return false;
  }
  if (!fs::is_directory(p, ec)) {
    error = p.string() + " is not a directory";
    return false;
  }
  return true;
}

std::string create_session_folder(const std::string& root, const std::string& id) {
  const std::string base = (fs::path(root) / (utc_compact_now() + "-" + safe_name(id))).string();
  // Claimed with one mkdir(2), which fails with EEXIST when another process made the same name first (several
  // cells sharing one data root start sessions of the same vehicle in the same second): never two sessions in
  // one folder, and never a check-then-create race.
  std::string err;
  if (!make_directories_durably(root, err))
    throw std::runtime_error("cannot create the session folder's parent: " + err);
  std::string path = base;
  for (int i = 2;; ++i) {
    if (::mkdir(path.c_str(), 0755) == 0) break;
    if (errno != EEXIST || i > 10000)
      throw std::runtime_error("cannot create the session folder " + path + ": " + std::strerror(errno));
    path = base + "-" + std::to_string(i);
  }
  // Each new name fsync'd into its directory before the program goes on (docs/records.md, "The chain").
  for (const char* sub : {"inputs", "traces"})
    if (::mkdir((fs::path(path) / sub).c_str(), 0755) != 0 && errno != EEXIST)
      throw std::runtime_error("cannot create the session folder " + path + ": " + sub + ": " +
                               std::strerror(errno));
  if (!sync_directory(root, err) || !sync_directory(path, err))
    throw std::runtime_error("cannot make the session folder " + path + " durable: " + err);
  return path;
}

bool write_durable(const std::string& path, const std::string& content, std::string& error) {
  const std::string tmp = path + ".tmp";
  // Never through a symlink planted at the temporary name.
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_NOFOLLOW | O_CLOEXEC, 0644);
  if (fd < 0) {
    error = "cannot create " + tmp + ": " + std::strerror(errno);
    return false;
  }
  // Every failure below removes the temporary file: a full disk must not leave *.tmp files in a record
  // folder.
  auto fail = [&](const std::string& what, bool close_fd) {
    error = what + ": " + std::strerror(errno);
    if (close_fd) ::close(fd);
    ::unlink(tmp.c_str());
    return false;
  };
  std::size_t done = 0;
  while (done < content.size()) {
    const ssize_t w = ::write(fd, content.data() + done, content.size() - done);
    if (w < 0 && errno == EINTR) continue;
    if (w < 0) return fail("cannot write " + tmp, true);
    done += static_cast<std::size_t>(w);
  }
  if (::fsync(fd) != 0) return fail("cannot sync " + tmp, true);
  if (::close(fd) != 0) return fail("cannot close " + tmp, false);
  if (::rename(tmp.c_str(), path.c_str()) != 0) return fail("cannot rename " + tmp, false);
  // The new name is durable only once its directory is synced: a failure here is a failure of the write (the
  // file holds the new content, but a power loss could still bring back the old one or none).
  std::string derr;
  if (!sync_directory(fs::path(path).parent_path().string(), derr)) {
    error = path + " was written, but it is not durable: " + derr;
    return false;
  }
  return true;
}

nlohmann::json copy_input(const std::string& folder, const std::string& source, const std::string& name) {
  std::ifstream in(source, std::ios::binary);
  if (!in) throw std::runtime_error("cannot read " + source);
  std::ostringstream ss;
  ss << in.rdbuf();
  const std::string rel = "inputs/" + name;
  std::string err;
  if (!write_durable((fs::path(folder) / rel).string(), ss.str(), err)) throw std::runtime_error(err);
  return {{"path", rel},
          {"sha256", sha256_hex(ss.str())},
          {"source", fs::absolute(source).lexically_normal().string()}};
}

std::string trace_csv(const std::vector<controller::Sample>& samples) {
  std::string out = "index,time_s,speed_kmh,force_n,mode,flags\n";
  out.reserve(samples.size() * 48 + 64);
  char buf[128];
  for (const auto& s : samples) {
    std::snprintf(buf, sizeof buf, "%llu,%.4f,%.4f,%.2f,%s,%u\n", static_cast<unsigned long long>(s.index),
                  s.time_s, s.speed_kmh, s.force_n, controller::to_string(s.mode), s.flags);
    out += buf;
  }
  return out;
}

bool read_trace_csv(const std::string& path, std::vector<double>& t, std::vector<double>& v,
                    std::string& error) {
  const InsideFile f = read_file_whole(path);  // under kMaxRecordFileBytes
  if (f.status != InsideStatus::ok) {
    error = f.status == InsideStatus::missing ? "cannot open " + path : f.error;
    return false;
  }
  return parse_trace_csv(f.content, path, t, v, error);
}

bool parse_trace_csv(const std::string& text, const std::string& name, std::vector<double>& t,
                     std::vector<double>& v, std::string& error) {
  std::istringstream in(text);
  const std::string& path = name;
  std::string line;
  if (!std::getline(in, line) || line.rfind("index,time_s,speed_kmh", 0) != 0) {
    error = path + ": not a loadtrim trace (header)";
    return false;
  }
  int n = 1;
  while (std::getline(in, line)) {
    ++n;
    const auto c1 = line.find(','), c2 = line.find(',', c1 + 1), c3 = line.find(',', c2 + 1);
    if (c1 == std::string::npos || c2 == std::string::npos || c3 == std::string::npos) {
      error = path + ": line " + std::to_string(n) + " has too few columns";
      return false;
    }
    double a = 0, b = 0;
    auto r1 = std::from_chars(line.data() + c1 + 1, line.data() + c2, a);
    auto r2 = std::from_chars(line.data() + c2 + 1, line.data() + c3, b);
    if (r1.ec != std::errc() || r2.ec != std::errc()) {
      error = path + ": line " + std::to_string(n) + " is not numeric";
      return false;
    }
    t.push_back(a);
    v.push_back(b);
  }
  return true;
}

}  // namespace loadtrim::record
