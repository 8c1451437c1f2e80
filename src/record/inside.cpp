#include "record/inside.hpp"

#include <dirent.h>
#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>

#include "record/sha256.hpp"

namespace loadtrim::record {

namespace {

struct Fd {
  int fd = -1;
  explicit Fd(int f = -1) : fd(f) {}
  ~Fd() {
    if (fd >= 0) ::close(fd);
  }
  Fd(const Fd&) = delete;
  Fd& operator=(const Fd&) = delete;
  Fd(Fd&& o) noexcept : fd(o.fd) { o.fd = -1; }
  Fd& operator=(Fd&& o) noexcept {
    if (this != &o) {
      if (fd >= 0) ::close(fd);
      fd = o.fd;
      o.fd = -1;
    }
    return *this;
  }
};

std::vector<std::string> split(const std::string& rel) {
  std::vector<std::string> parts;
  std::size_t p = 0;
  for (;;) {
    const auto q = rel.find('/', p);
    parts.push_back(rel.substr(p, q == std::string::npos ? std::string::npos : q - p));
    if (q == std::string::npos) break;
    p = q + 1;
  }
  return parts;
}

const char* kind_of(mode_t m) {
  if (S_ISLNK(m)) return "a symbolic link";
  if (S_ISFIFO(m)) return "a FIFO";
  if (S_ISSOCK(m)) return "a socket";
  if (S_ISCHR(m) || S_ISBLK(m)) return "a device";
  if (S_ISDIR(m)) return "a directory";
  return "not a regular file";
}

// Opens the regular file folder/rel (rules in the header); on failure, status and error are set and -1
// returned.
int open_inside(const std::string& folder, const std::string& rel, InsideStatus& status, std::string& error) {
  std::string why;
  if (!is_safe_relative_path(rel, &why)) {
    status = InsideStatus::unsafe;
    error = "\"" + rel + "\" is not a path inside the folder (" + why + "); it was not opened";
    return -1;
  }
  Fd dir(::open(folder.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC));
  if (dir.fd < 0) {
    status = errno == ENOENT ? InsideStatus::missing : InsideStatus::io_error;
    error = "cannot open the folder " + folder + ": " + std::strerror(errno);
    return -1;
  }
  const std::vector<std::string> parts = split(rel);
  std::string walked;
  for (std::size_t i = 0; i < parts.size(); ++i) {
    walked += (walked.empty() ? "" : "/") + parts[i];
    struct stat st {};
    if (::fstatat(dir.fd, parts[i].c_str(), &st, AT_SYMLINK_NOFOLLOW) != 0) {
      status = errno == ENOENT || errno == ENOTDIR ? InsideStatus::missing : InsideStatus::io_error;
      error = walked +
              (status == InsideStatus::missing ? " is missing" : std::string(": ") + std::strerror(errno));
      return -1;
    }
    const bool last = i + 1 == parts.size();
    if (!last) {
      if (!S_ISDIR(st.st_mode)) {
        status = S_ISLNK(st.st_mode) ? InsideStatus::unsafe : InsideStatus::missing;
        error = walked + " is " + kind_of(st.st_mode) +
                (status == InsideStatus::unsafe ? "; links are never followed" : "");
        return -1;
      }
      Fd next(::openat(dir.fd, parts[i].c_str(), O_RDONLY | O_DIRECTORY | O_NOFOLLOW | O_CLOEXEC));
      if (next.fd < 0) {
        status = errno == ELOOP ? InsideStatus::unsafe : InsideStatus::io_error;
        error = "cannot open " + walked + ": " + std::strerror(errno);
        return -1;
      }
      dir = std::move(next);
      continue;
    }
    if (!S_ISREG(st.st_mode)) {
      status = InsideStatus::unsafe;
      error = walked + " is " + kind_of(st.st_mode) + "; only regular files are read";
      return -1;
    }
    const int fd =
        ::openat(dir.fd, parts[i].c_str(), O_RDONLY | O_NOFOLLOW | O_NONBLOCK | O_NOCTTY | O_CLOEXEC);
    if (fd < 0) {
      status = errno == ELOOP    ? InsideStatus::unsafe
               : errno == ENOENT ? InsideStatus::missing
                                 : InsideStatus::io_error;
      error = "cannot open " + walked + ": " + std::strerror(errno);
      return -1;
    }
    struct stat again {};
    // The entry may have been swapped between the check and the open: insist it is the same regular file.
    if (::fstat(fd, &again) != 0 || !S_ISREG(again.st_mode) || again.st_ino != st.st_ino ||
        again.st_dev != st.st_dev) {
      ::close(fd);
      status = InsideStatus::unsafe;
      error = walked + " changed while it was being opened";
      return -1;
    }
    status = InsideStatus::ok;
    return fd;
  }
  status = InsideStatus::unsafe;
  error = "empty path";
  return -1;
}

std::string too_large_message(const std::string& name, std::uint64_t size, std::uint64_t max_bytes) {
  return name + " is " + std::to_string(size) + " bytes, more than the " + std::to_string(max_bytes) +
         " bytes a record file may have to be read whole (docs/records.md, \"Size limits\"); it was not read";
}

// Reads the whole of fd, refusing more than max_bytes (checked on the size before reading, and again while
// reading: the file may grow).
bool read_all(int fd, std::string& out, std::string& error, const std::string& rel, std::uint64_t max_bytes,
              InsideStatus& status) {
  struct stat st {};
  if (::fstat(fd, &st) != 0) {
    status = InsideStatus::io_error;
    error = "cannot examine " + rel + ": " + std::strerror(errno);
    return false;
  }
  if (st.st_size > 0 && static_cast<std::uint64_t>(st.st_size) > max_bytes) {
    status = InsideStatus::too_large;
    error = too_large_message(rel, static_cast<std::uint64_t>(st.st_size), max_bytes);
    return false;
  }
  if (st.st_size > 0) out.reserve(static_cast<std::size_t>(st.st_size));
  char buf[65536];
  for (;;) {
    const ssize_t n = ::read(fd, buf, sizeof buf);
    if (n < 0 && errno == EINTR) continue;
    if (n < 0) {
      status = InsideStatus::io_error;
      error = "cannot read " + rel + ": " + std::strerror(errno);
      return false;
    }
    if (n == 0) return true;
    if (out.size() + static_cast<std::size_t>(n) > max_bytes) {
      status = InsideStatus::too_large;
      error = too_large_message(rel, out.size() + static_cast<std::size_t>(n), max_bytes);
      return false;
    }
    out.append(buf, static_cast<std::size_t>(n));
  }
}

bool walk(int dirfd, const std::string& prefix, int depth, std::vector<std::string>& out, std::string& error,
          std::string& offending) {
  if (depth > 32) {
    error = prefix + " is nested too deeply";
    return false;
  }
  const int dup = ::fcntl(dirfd, F_DUPFD_CLOEXEC, 0);
  if (dup < 0) {
    error = "cannot list " + (prefix.empty() ? std::string(".") : prefix) + ": " + std::strerror(errno);
    return false;
  }
  DIR* d = ::fdopendir(dup);
  if (!d) {
    ::close(dup);
    error = "cannot list " + (prefix.empty() ? std::string(".") : prefix) + ": " + std::strerror(errno);
    return false;
  }
  bool ok = true;
  while (ok) {
    errno = 0;
    const dirent* e = ::readdir(d);
    if (!e) {
      if (errno != 0) {
        error = "cannot list " + (prefix.empty() ? std::string(".") : prefix) + ": " + std::strerror(errno);
        ok = false;
      }
      break;
    }
    const std::string name = e->d_name;
    if (name == "." || name == "..") continue;
    const std::string rel = prefix.empty() ? name : prefix + "/" + name;
    struct stat st {};
    if (::fstatat(dirfd, name.c_str(), &st, AT_SYMLINK_NOFOLLOW) != 0) {
      error = "cannot examine " + rel + ": " + std::strerror(errno);
      ok = false;
      break;
    }
    if (S_ISREG(st.st_mode)) {
      out.push_back(rel);
    } else if (S_ISDIR(st.st_mode)) {
      Fd sub(::openat(dirfd, name.c_str(), O_RDONLY | O_DIRECTORY | O_NOFOLLOW | O_CLOEXEC));
      if (sub.fd < 0) {
        error = "cannot open " + rel + ": " + std::strerror(errno);
        ok = false;
        break;
      }
      ok = walk(sub.fd, rel, depth + 1, out, error, offending);
    } else {
      offending = rel;
      error =
          rel + " is " + kind_of(st.st_mode) + "; a record folder holds only regular files and directories";
      ok = false;
    }
  }
  ::closedir(d);
  return ok;
}

}  // namespace

bool is_safe_relative_path(const std::string& rel, std::string* why) {
  auto no = [why](const char* w) {
    if (why) *why = w;
    return false;
  };
  if (rel.empty()) return no("empty");
  if (rel.front() == '/') return no("absolute");
  if (rel.find('\\') != std::string::npos) return no("contains a backslash");
  if (rel.find('\0') != std::string::npos) return no("contains a NUL byte");
  for (const auto& p : split(rel)) {
    if (p.empty()) return no("has an empty component");
    if (p == ".") return no("has a '.' component");
    if (p == "..") return no("has a '..' component");
  }
  return true;
}

InsideFile read_inside(const std::string& folder, const std::string& rel, std::uint64_t max_bytes) {
  InsideFile f;
  Fd fd(open_inside(folder, rel, f.status, f.error));
  if (fd.fd < 0) return f;
  if (!read_all(fd.fd, f.content, f.error, rel, max_bytes, f.status)) {
    f.content.clear();
    f.content.shrink_to_fit();
  }
  return f;
}

InsideFile read_file_whole(const std::string& path, std::uint64_t max_bytes) {
  InsideFile f;
  Fd fd(::open(path.c_str(), O_RDONLY | O_NONBLOCK | O_NOCTTY | O_CLOEXEC));
  if (fd.fd < 0) {
    f.status = errno == ENOENT ? InsideStatus::missing : InsideStatus::io_error;
    f.error = "cannot open " + path + ": " + std::strerror(errno);
    return f;
  }
  struct stat st {};
  if (::fstat(fd.fd, &st) != 0 || !S_ISREG(st.st_mode)) {
    f.status = InsideStatus::unsafe;
    f.error = path + " is not a regular file";
    return f;
  }
  f.status = InsideStatus::ok;
  if (!read_all(fd.fd, f.content, f.error, path, max_bytes, f.status)) {
    f.content.clear();
    f.content.shrink_to_fit();
  }
  return f;
}

InsideHash hash_inside(const std::string& folder, const std::string& rel) {
  InsideHash h;
  Fd fd(open_inside(folder, rel, h.status, h.error));
  if (fd.fd < 0) return h;
  // Streamed: a file of any size is hashed in constant memory (a damaged trace of gigabytes is read through,
  // never held).
  Sha256 sha;
  std::vector<char> buf(kHashChunkBytes);
  for (;;) {
    const ssize_t n = ::read(fd.fd, buf.data(), buf.size());
    if (n < 0 && errno == EINTR) continue;
    if (n < 0) {
      h.status = InsideStatus::io_error;
      h.error = "cannot read " + rel + ": " + std::strerror(errno);
      return h;
    }
    if (n == 0) break;
    sha.update(buf.data(), static_cast<std::size_t>(n));
    h.bytes += static_cast<std::uint64_t>(n);
  }
  h.sha256 = sha.hex();
  return h;
}

InsideFile sync_inside(const std::string& folder, const std::string& rel) {
  InsideFile f;
  Fd fd(open_inside(folder, rel, f.status, f.error));
  if (fd.fd < 0) return f;
  if (::fsync(fd.fd) != 0) {
    f.status = InsideStatus::io_error;
    f.error = "cannot sync " + rel + ": " + std::strerror(errno);
  }
  return f;
}

FolderListing list_inside(const std::string& folder) {
  FolderListing l;
  Fd dir(::open(folder.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC));
  if (dir.fd < 0) {
    l.error = "cannot open the folder " + folder + ": " + std::strerror(errno);
    return l;
  }
  if (!walk(dir.fd, "", 0, l.files, l.error, l.offending)) {
    l.files.clear();
    return l;
  }
  std::sort(l.files.begin(), l.files.end());
  l.ok = true;
  return l;
}

}  // namespace loadtrim::record
