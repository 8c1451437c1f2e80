#include "record/data_root.hpp"

#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "record/session_folder.hpp"

namespace loadtrim::record {

namespace fs = std::filesystem;

namespace {

std::string trim(const std::string& s) {
  const auto a = s.find_first_not_of(" \t\r");
  if (a == std::string::npos) return "";
  const auto b = s.find_last_not_of(" \t\r");
  return s.substr(a, b - a + 1);
}

void utf8(std::string& out, unsigned long cp) {
  if (cp < 0x80) {
    out += static_cast<char>(cp);
  } else if (cp < 0x800) {
    out += static_cast<char>(0xC0 | (cp >> 6));
    out += static_cast<char>(0x80 | (cp & 0x3F));
  } else if (cp < 0x10000) {
    out += static_cast<char>(0xE0 | (cp >> 12));
    out += static_cast<char>(0x80 | ((cp >> 6) & 0x3F));
    out += static_cast<char>(0x80 | (cp & 0x3F));
  } else {
    out += static_cast<char>(0xF0 | (cp >> 18));
    out += static_cast<char>(0x80 | ((cp >> 12) & 0x3F));
    out += static_cast<char>(0x80 | ((cp >> 6) & 0x3F));
    out += static_cast<char>(0x80 | (cp & 0x3F));
  }
}

// After a closing quote only blanks and a comment may follow.
bool only_comment_after(const std::string& s, std::size_t pos) {
  const std::string rest = trim(s.substr(pos));
  return rest.empty() || rest.front() == '#';
}

// Parses the one-line TOML string at the start of v (already trimmed); false with why on anything else.
bool parse_string(const std::string& v, std::string& out, std::string& why) {
  if (v.rfind("\"\"\"", 0) == 0 || v.rfind("'''", 0) == 0) {
    why = "is a multi-line string; write it on one line";
    return false;
  }
  if (!v.empty() && v.front() == '\'') {
    const auto end = v.find('\'', 1);
    if (end == std::string::npos || !only_comment_after(v, end + 1)) {
      why = "is not a well-formed string";
      return false;
    }
    out = v.substr(1, end - 1);
    return true;
  }
  if (v.empty() || v.front() != '"') {
    why = "is not a string";
    return false;
  }
  out.clear();
  for (std::size_t i = 1; i < v.size(); ++i) {
    const char c = v[i];
    if (c == '"') {
      if (!only_comment_after(v, i + 1)) {
        why = "has text after its closing quote";
        return false;
      }
      return true;
    }
    if (c != '\\') {
      out += c;
      continue;
    }
    if (++i >= v.size()) break;
    switch (v[i]) {
      case 'b':
        out += '\b';
        break;
      case 't':
        out += '\t';
        break;
      case 'n':
        out += '\n';
        break;
      case 'f':
        out += '\f';
        break;
      case 'r':
        out += '\r';
        break;
      case '"':
        out += '"';
        break;
      case '\\':
        out += '\\';
        break;
      case 'u':
      case 'U': {
        const std::size_t n = v[i] == 'u' ? 4 : 8;
        if (i + n >= v.size()) {
          why = "has a short \\u escape";
          return false;
        }
        unsigned long cp = 0;
        for (std::size_t k = 1; k <= n; ++k) {
          const char h = v[i + k];
          const int d = (h >= '0' && h <= '9')   ? h - '0'
                        : (h >= 'a' && h <= 'f') ? h - 'a' + 10
                        : (h >= 'A' && h <= 'F') ? h - 'A' + 10
                                                 : -1;
          if (d < 0) {
            why = "has a malformed \\u escape";
            return false;
          }
          cp = cp * 16 + static_cast<unsigned long>(d);
        }
        if (cp > 0x10FFFF || (cp >= 0xD800 && cp <= 0xDFFF)) {
          why = "escapes an invalid code point";
          return false;
        }
        utf8(out, cp);
        i += n;
        break;
      }
      default:
        why = "has an unknown escape";
        return false;
    }
  }
  why = "has no closing quote";
  return false;
}

std::string unquote_key(const std::string& k) {
  if (k.size() >= 2 && ((k.front() == '"' && k.back() == '"') || (k.front() == '\'' && k.back() == '\'')))
    return k.substr(1, k.size() - 2);
  return k;
}

std::string normal(const fs::path& p) {
  std::string s = p.lexically_normal().string();
  while (s.size() > 1 && s.back() == '/') s.pop_back();
  return s;
}

std::string absolute_from(const std::string& p, const std::string& cwd) {
  const fs::path x(p);
  return normal(x.is_absolute() || cwd.empty() ? x : fs::path(cwd) / x);
}

}  // namespace

std::optional<std::string> toml_string_value(const std::string& text, const std::string& table,
                                             const std::string& key, std::string* error) {
  std::istringstream in(text);
  std::string line, current;
  std::optional<std::string> found;
  int n = 0;
  while (std::getline(in, line)) {
    ++n;
    const std::string t = trim(line);
    if (t.empty() || t.front() == '#') continue;
    if (t.front() == '[') {
      const bool array = t.rfind("[[", 0) == 0;
      const auto close = t.find(array ? "]]" : "]");
      current = close == std::string::npos ? std::string("\x01")
                                           : trim(t.substr(array ? 2 : 1, close - (array ? 2 : 1)));
      if (array) current = "\x01" + current;  // an array of tables never matches
      continue;
    }
    const auto eq = t.find('=');
    if (eq == std::string::npos || current != table || unquote_key(trim(t.substr(0, eq))) != key) continue;
    std::string value, why;
    if (!parse_string(trim(t.substr(eq + 1)), value, why)) {
      if (error)
        *error = (table.empty() ? "" : table + ".") + key + " (line " + std::to_string(n) + ") " + why;
      return std::nullopt;
    }
    if (found) {
      if (error)
        *error =
            (table.empty() ? "" : table + ".") + key + " (line " + std::to_string(n) + ") is defined twice";
      return std::nullopt;
    }
    found = value;
  }
  if (error) error->clear();
  return found;
}

std::string DataRoot::describe() const {
  if (!ok()) return "no data root: " + error;
  return path + " (from " + source + ")";
}

DataRoot resolve_data_root(const DataRootInputs& in) {
  DataRoot r;
  if (!in.option.empty()) {
    r.path = absolute_from(in.option, in.cwd);
    r.source = "--data-dir";
    return r;
  }
  if (in.env && !in.env->empty()) {
    r.path = absolute_from(*in.env, in.cwd);
    r.source = std::string("environment variable ") + kDataDirEnv;
    return r;
  }
  if (in.system_config) {
    std::string err;
    const auto v = toml_string_value(*in.system_config, "", "data_dir", &err);
    if (!err.empty()) {
      r.error = in.system_config_path + ": " + err;
      return r;
    }
    if (v) {
      if (v->empty() || v->front() != '/') {
        r.error = in.system_config_path + ": data_dir is \"" + *v + "\"; it must be an absolute path";
        return r;
      }
      r.path = normal(*v);
      r.source = in.system_config_path + " (data_dir)";
      return r;
    }
  }
  if (in.xdg_data_home && !in.xdg_data_home->empty() && in.xdg_data_home->front() == '/') {
    r.path = normal(fs::path(*in.xdg_data_home) / "loadtrim");
    r.source = "$XDG_DATA_HOME/loadtrim";
    return r;
  }
  if (in.home && !in.home->empty() && in.home->front() == '/') {
    r.path = normal(fs::path(*in.home) / ".local/share/loadtrim");
    r.source = "the per-user default ~/.local/share/loadtrim";
    return r;
  }
  r.error = std::string("no --data-dir, no ") + kDataDirEnv + ", no data_dir in " + in.system_config_path +
            ", and neither XDG_DATA_HOME nor HOME is an absolute path; give --data-dir";
  return r;
}

DataRoot find_data_root(const std::string& option) {
  DataRootInputs in;
  in.option = option;
  auto env = [](const char* name) -> std::optional<std::string> {
    const char* v = std::getenv(name);
    return v ? std::optional<std::string>(v) : std::nullopt;
  };
  in.env = env(kDataDirEnv);
  in.xdg_data_home = env("XDG_DATA_HOME");
  in.home = env("HOME");
  std::error_code ec;
  const fs::path cwd = fs::current_path(ec);
  if (!ec) in.cwd = cwd.string();
  // The system file is read only when it can matter, and an unreadable one is an error rather than skipped.
  if (option.empty() && !(in.env && !in.env->empty())) {
    if (fs::exists(kSystemConfigPath, ec)) {
      std::ifstream f(kSystemConfigPath, std::ios::binary);
      if (!f) {
        DataRoot r;
        r.error = std::string("cannot read ") + kSystemConfigPath;
        return r;
      }
      std::ostringstream ss;
      ss << f.rdbuf();
      in.system_config = ss.str();
    }
  }
  try {
    return resolve_data_root(in);
  } catch (const std::exception& e) {
    DataRoot r;
    r.error = std::string("cannot resolve the data root: ") + e.what();
    return r;
  }
}

bool ensure_data_root(const DataRoot& root, std::string& error, std::vector<std::string>* notes) {
  if (!root.ok()) {
    error = root.describe();
    return false;
  }
  // Each directory made is fsync'd into its parent (docs/records.md, "The data root").
  std::string err;
  if (!make_directories_durably(root.path, err)) {
    error = "cannot create the data root " + root.path + ": " + err;
    return false;
  }
  for (const auto& d : {root.sessions(), root.checks(), root.history(), root.queue()})
    if (!make_directories_durably(d, error)) return false;
  const std::string keys = root.keys();
  if (::mkdir(keys.c_str(), 0700) == 0) {
    if (!sync_directory(root.path, error)) return false;
  } else if (errno != EEXIST) {
    error = "cannot create " + keys + ": " + std::strerror(errno);
    return false;
  }
  struct stat st {};
  if (::stat(keys.c_str(), &st) != 0 || !S_ISDIR(st.st_mode)) {
    error = keys + " is not a directory";
    return false;
  }
  if ((st.st_mode & 077) != 0) {
    if (::chmod(keys.c_str(), 0700) != 0) {
      error = keys + " may be entered by others and cannot be narrowed to 0700: " + std::strerror(errno);
      return false;
    }
    if (notes) notes->push_back(keys + " was open to others; narrowed to mode 0700");
  }
  return true;
}

}  // namespace loadtrim::record
