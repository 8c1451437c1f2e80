// The lab's data root (record/data_root.hpp): the order of the sources, the XDG rule, the system file, the
// layout with keys/ at 0700, and the small TOML string reader. External references: the XDG Base Directory
// Specification (a relative XDG_DATA_HOME is ignored; the default is $HOME/.local/share) and TOML v1.0.0
// (basic-string escapes, literal strings, comments, table headers).
#include "record/data_root.hpp"

#include <gtest/gtest.h>
#include <sys/stat.h>

#include <filesystem>

using namespace loadtrim;
namespace fs = std::filesystem;

namespace {
record::DataRootInputs base() {
  record::DataRootInputs in;
  in.cwd = "/work/here";
  in.home = "/home/lab";
  return in;
}
}  // namespace

TEST(DataRoot, FirstSourceWins) {
  auto in = base();
  in.option = "roots/a";
  in.env = "/env/root";
  in.system_config = "data_dir = \"/sys/root\"\n";
  in.xdg_data_home = "/xdg";
  auto r = record::resolve_data_root(in);
  EXPECT_EQ(r.path, "/work/here/roots/a");
  EXPECT_EQ(r.source, "--data-dir");

  in.option.clear();
  r = record::resolve_data_root(in);
  EXPECT_EQ(r.path, "/env/root");
  EXPECT_NE(r.source.find("LOADTRIM_DATA_DIR"), std::string::npos);

  in.env = "";  // empty counts as unset
  r = record::resolve_data_root(in);
  EXPECT_EQ(r.path, "/sys/root");
  EXPECT_NE(r.source.find("/etc/loadtrim/loadtrim.toml"), std::string::npos);

  in.system_config.reset();
  r = record::resolve_data_root(in);
  EXPECT_EQ(r.path, "/xdg/loadtrim");
  EXPECT_EQ(r.source, "$XDG_DATA_HOME/loadtrim");

  in.xdg_data_home = "relative/xdg";  // XDG: relative values are ignored
  r = record::resolve_data_root(in);
  EXPECT_EQ(r.path, "/home/lab/.local/share/loadtrim");
  EXPECT_NE(r.source.find("~/.local/share/loadtrim"), std::string::npos);

  in.home.reset();
  r = record::resolve_data_root(in);
  EXPECT_FALSE(r.ok());
  EXPECT_NE(r.error.find("--data-dir"), std::string::npos) << r.error;
}

TEST(DataRoot, RelativeValuesAreTakenFromTheCurrentFolderAndNormalised) {
  auto in = base();
  in.env = "data/../lab-data/";
  EXPECT_EQ(record::resolve_data_root(in).path, "/work/here/lab-data");
  in.option = "/abs/root/";
  EXPECT_EQ(record::resolve_data_root(in).path, "/abs/root");
}

TEST(DataRoot, SystemFileMistakesAreErrorsNotFallThroughs) {
  auto in = base();
  in.system_config = "# the lab's settings\nother = 1\n";
  EXPECT_EQ(record::resolve_data_root(in).path, "/home/lab/.local/share/loadtrim")
      << "no data_dir: the next source";
  in.system_config = "data_dir = \"relative/path\"\n";
  auto r = record::resolve_data_root(in);
  EXPECT_FALSE(r.ok());
  EXPECT_NE(r.error.find("absolute"), std::string::npos) << r.error;
  in.system_config = "data_dir = 42\n";
  r = record::resolve_data_root(in);
  EXPECT_FALSE(r.ok());
  EXPECT_NE(r.error.find("data_dir (line 1)"), std::string::npos) << r.error;
  // A data_dir inside a table is not the top-level key.
  in.system_config = "[elsewhere]\ndata_dir = \"/not/this\"\n";
  EXPECT_EQ(record::resolve_data_root(in).path, "/home/lab/.local/share/loadtrim");
}

TEST(DataRoot, TomlStringValues) {
  std::string err;
  const std::string text =
      "# comment\ndata_dir = \"/srv/lab\" # trailing comment\n[records]\npublic_key = 'sha256:ab'\n"
      "escaped = \"a\\\\b\\\"c\\u00e9\"\n[[tables]]\npublic_key = \"array table\"\n";
  EXPECT_EQ(record::toml_string_value(text, "", "data_dir", &err), "/srv/lab");
  EXPECT_EQ(record::toml_string_value(text, "records", "public_key", &err), "sha256:ab");
  EXPECT_EQ(record::toml_string_value(text, "records", "escaped", &err), "a\\b\"c\xC3\xA9");
  EXPECT_EQ(record::toml_string_value(text, "records", "missing", &err), std::nullopt);
  EXPECT_TRUE(err.empty());
  EXPECT_EQ(record::toml_string_value("k = \"\"\"multi\nline\"\"\"\n", "", "k", &err), std::nullopt);
  EXPECT_NE(err.find("multi-line"), std::string::npos);
  EXPECT_EQ(record::toml_string_value("k = \"a\"\nk = \"b\"\n", "", "k", &err), std::nullopt);
  EXPECT_NE(err.find("twice"), std::string::npos);
  EXPECT_EQ(record::toml_string_value("k = \"open\n", "", "k", &err), std::nullopt);
  EXPECT_FALSE(err.empty());
}

TEST(DataRoot, LayoutIsCreatedWithPrivateKeys) {
  std::string t = (fs::temp_directory_path() / "loadtrim-root-XXXXXX").string();
  ASSERT_TRUE(::mkdtemp(t.data()));
  record::DataRootInputs in;
  in.option = t + "/lab";
  const record::DataRoot root = record::resolve_data_root(in);
  std::string err;
  const mode_t old = ::umask(0);
  const bool ok = record::ensure_data_root(root, err);
  ::umask(old);
  ASSERT_TRUE(ok) << err;
  for (const auto& d : {root.sessions(), root.checks(), root.history(), root.keys(), root.queue()})
    EXPECT_TRUE(fs::is_directory(d)) << d;
  struct stat st {};
  ASSERT_EQ(::stat(root.keys().c_str(), &st), 0);
  EXPECT_EQ(st.st_mode & 0777, 0700u);
  // An existing keys/ open to others is narrowed, and said so.
  ASSERT_EQ(::chmod(root.keys().c_str(), 0755), 0);
  std::vector<std::string> notes;
  ASSERT_TRUE(record::ensure_data_root(root, err, &notes)) << err;
  ASSERT_EQ(::stat(root.keys().c_str(), &st), 0);
  EXPECT_EQ(st.st_mode & 0777, 0700u);
  EXPECT_EQ(notes.size(), 1u);
  // Unresolved roots are not created.
  EXPECT_FALSE(record::ensure_data_root(record::DataRoot{}, err));
  fs::remove_all(t);
}
