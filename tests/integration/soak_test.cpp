// Soak: back-to-back setting sessions against ONE simulated controller process over TCP, with 1 kHz sample
// streams at a high time scale. Each session connects a fresh controller object (as each `loadtrim run` does)
// and writes its own folder. After every session the test records, for this process (the tool's side) and for
// the simulator process: resident memory (VmRSS, /proc/PID/status) and open file descriptors (/proc/PID/fd),
// and the link statistics (samples received, samples lost to gaps in the controller's sample index, lines
// rejected).
//
// Checks: every session accepted and its folder verifies; no sample or line lost; the file-descriptor counts
// of both processes equal after every session to what they were after the first one; resident memory after
// the last session within a bound of its value after the warm-in sessions (bound: common practice, no source;
// allocator caches make a few hundred KiB of drift normal). The tool's RSS is read after malloc_trim(0),
// which returns the allocator's free pages (without it, glibc's per-thread arenas keep several MB of freed 1
// kHz trace buffers). Under AddressSanitizer the quarantine grows RSS by design, so there the memory check is
// LeakSanitizer's at exit and RSS is reported only.
//
// LOADTRIM_SOAK_SESSIONS (default 50) sets the number of sessions; LOADTRIM_SOAK_TIME_SCALE (default 200; 20
// under AddressSanitizer) the simulator's time scale. The table printed at the end is the one quoted in
// docs/soak.md.
#include <gtest/gtest.h>
#include <malloc.h>
#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <fstream>

#include "config/cell_loader.hpp"
#include "config/loaders.hpp"
#include "record/event_log.hpp"
#include "registry.hpp"
#include "session/record_writer.hpp"
#include "session/session.hpp"
#include "support/sim_process.hpp"

using namespace loadtrim;
namespace fs = std::filesystem;
using loadtrim::testing::SimProcess;

#if defined(__SANITIZE_ADDRESS__)
constexpr bool kAsan = true;
#else
constexpr bool kAsan = false;
#endif

namespace {
const std::string kSrc = LOADTRIM_SOURCE_DIR;

long rss_kib(int pid) {
  std::ifstream f("/proc/" + std::to_string(pid) + "/status");
  std::string line;
  while (std::getline(f, line))
    if (line.rfind("VmRSS:", 0) == 0) return std::stol(line.substr(6));
  return -1;
}

// Bytes the allocator holds in use, over every arena (glibc malloc_info: the arenas' current system memory
// minus their free chunks, fast and regular, plus the mmapped chunks in use). mallinfo2 alone sees the main
// arena only, and the keep-alive and analysis threads allocate in arenas of their own.
long heap_in_use_kib() {
  char* buf = nullptr;
  std::size_t len = 0;
  FILE* f = ::open_memstream(&buf, &len);
  if (!f) return -1;
  ::malloc_info(0, f);
  std::fclose(f);
  const std::string xml(buf, len);
  std::free(buf);
  // The totals are the last elements of the document, after every arena's own.
  auto last = [&](const std::string& tag) -> long long {
    const auto p = xml.rfind(tag);
    if (p == std::string::npos) return -1;
    const auto q = xml.find("size=\"", p);
    return q == std::string::npos ? -1 : std::atoll(xml.c_str() + q + 6);
  };
  const long long system = last("<system type=\"current\""), fast = last("<total type=\"fast\""),
                  rest = last("<total type=\"rest\""), mmap = last("<total type=\"mmap\"");
  if (system < 0 || fast < 0 || rest < 0 || mmap < 0) return -1;
  return static_cast<long>((system - fast - rest + mmap) / 1024);
}

long open_fds(int pid) {
  std::error_code ec;
  long n = 0;
  for (auto it = fs::directory_iterator("/proc/" + std::to_string(pid) + "/fd", ec);
       !ec && it != fs::directory_iterator(); it.increment(ec))
    ++n;
  return ec ? -1 : n;
}

int env_int(const char* name, int fallback) {
  const char* v = std::getenv(name);
  return v && *v ? std::atoi(v) : fallback;
}

// Reply and sample-gap deadlines: 1 s in the normal build. Under AddressSanitizer both processes run several
// times slower and the sanitizer pass runs two tests at once on two cores: a STATUS reply took longer than 1
// s in session 4 of a CI run (stop 29), so there the deadlines (and the simulator's watchdog) are 3 s. This
// test is about leaks and lost samples; the deadlines themselves are tested elsewhere (SessionUnit, Framed,
// the hostile controller).
std::string cell_text(unsigned port) {
  const std::string deadline_ms = kAsan ? "3000" : "1000";
  return "name = \"soak cell (invented)\"\n[controller]\nadapter = \"line-tcp\"\nhost = \"127.0.0.1\"\nport "
         "= " +
         std::to_string(port) +
         "\nsample_rate_hz = 1000.0\nmax_time_scale = 10000.0\n"
         "[timeouts]\nconnect_ms = 3000\nreply_ms = " +
         deadline_ms + "\nsample_gap_ms = " + deadline_ms +
         "\nheartbeat_interval_ms = 100\n"
         "[reconnect]\nattempts = 3\ndelay_ms = 500\n"
         "[limits]\nmax_speed_kmh = 160.0\nmax_force_n = 8000.0\nmax_motoring_s = 7200.0\n"
         "[dyno]\nroller_diameter_m = 1.2192\nbase_inertia_kg = 1250.0\naxles = \"single-axle\"\nrun_up = "
         "\"vehicle\"\n";
}

struct Row {
  int session;
  long tool_rss, sim_rss, tool_fds, sim_fds, tool_heap;
  std::uint64_t received, lost, rejected, lines_lost;
  int coastdowns;
};
}  // namespace

TEST(Soak, BackToBackSessionsAtOneKilohertzLeakNothing) {
  const int n = env_int("LOADTRIM_SOAK_SESSIONS", 50);
  // Under AddressSanitizer the tool runs several times slower: at 200x a 1 kHz stream lost the link for about
  // 2 s in one of the first sessions (three runs on a 2-core host, stop 27), so the sanitizer build soaked at
  // 100x (passed: 50 sessions, 326 s); on a host loaded with two builds the simulator then managed only 49x
  // and the tool rightly refused its clock, so it soaked at 50x. In a CI sanitizer pass at 50x (50,000
  // samples per wall second, CI of 2026-12-04) the soak failed; on a 2-core host beside three busy loops the
  // tool lost 82,485 samples in session 3 of 4. It soaks at 20x (beside three busy loops: no sample lost in
  // 4 sessions, 119 s). The normal build keeps 200x.
  const int scale = env_int("LOADTRIM_SOAK_TIME_SCALE", kAsan ? 20 : 200);
  ASSERT_GE(n, 3);
  // The simulator's watchdog: 1 s, or 3 s under AddressSanitizer, as the cell's deadlines (cell_text): on a
  // loaded host the sanitizer build's heartbeats were more than 1 s apart and the watchdog latched.
  SimProcess sim({"--time-scale", std::to_string(scale), "--watchdog-ms", kAsan ? "3000" : "1000",
                  "--exit-after-s", "3600"});
  const core::Profile profile = config::load_profile(kSrc + "/tests/data/soak-short.toml");
  const core::VehicleTarget target = config::load_target(kSrc + "/samples/targets/demo-hatchback.toml");
  const controller::CellConfig cell =
      config::parse_cell(cell_text(sim.port()), "soak-cell.toml", adapters::production().sections());
  std::string base = (fs::temp_directory_path() / "loadtrim-soak-XXXXXX").string();
  ASSERT_NE(::mkdtemp(base.data()), nullptr);

  std::vector<Row> rows;
  for (int k = 1; k <= n; ++k) {
    const std::string folder = base + "/session-" + std::to_string(k);
    fs::create_directories(folder);
    Row row{};
    row.session = k;
    {
      auto c = adapters::make_controller(cell);
      session::RecordWriter writer(folder);
      session::Options opt;
      opt.sample_rate_hz = 1000.0;
      opt.first_setting = core::FirstSetting::standard;
      session::Session s(session::plan_inputs(cell, profile, target), opt, *c, {&writer});
      const session::Summary sum = s.run();
      EXPECT_EQ(sum.outcome, session::Outcome::accepted) << "session " << k << ": " << sum.stop_reason;
      row.coastdowns = sum.coastdowns;
      row.received = c->stats().samples_received;
      row.lost = c->stats().samples_lost;
      row.rejected = c->stats().lines_rejected;
      row.lines_lost = c->stats().lines_lost;
    }  // the controller, its socket and the record's files are closed here
    const auto v = record::verify_session_folder(folder);
    EXPECT_TRUE(v.ok) << "session " << k << ": " << v.message;
    if (!std::getenv("LOADTRIM_SOAK_KEEP"))
      fs::remove_all(folder);  // 1 kHz traces are large; the folder has been verified
    else
      fs::remove_all(folder + "/traces");
    // Free memory the allocator keeps cached (glibc: per-thread arenas and the dynamic mmap threshold keep
    // the pages of freed multi-MB trace buffers) is handed back first, so RSS shows what is still allocated.
    ::malloc_trim(0);
    row.tool_rss = rss_kib(static_cast<int>(::getpid()));
    row.tool_heap = heap_in_use_kib();
    row.sim_rss = rss_kib(sim.pid());
    row.tool_fds = open_fds(static_cast<int>(::getpid()));
    row.sim_fds = open_fds(sim.pid());
    rows.push_back(row);
    EXPECT_EQ(row.lost, 0u) << "session " << k;
    EXPECT_EQ(row.lines_lost, 0u) << "session " << k;
    EXPECT_EQ(row.rejected, 0u) << "session " << k;
    // A 1 kHz stream over several coast-downs: well over 100k samples per session (at least 2 coast-downs
    // from 142 km/h, each tens of seconds of controller time, docs/standards.md §6.2 times).
    EXPECT_GT(row.received, 100000u) << "session " << k;
    EXPECT_EQ(row.tool_fds, rows.front().tool_fds) << "tool file descriptors after session " << k;
    EXPECT_EQ(row.sim_fds, rows.front().sim_fds) << "simulator file descriptors after session " << k;
    if (HasFailure()) break;
  }
  if (std::getenv("LOADTRIM_SOAK_SMAPS")) {  // diagnosis: the tool's largest resident mappings
    std::ifstream sm("/proc/self/smaps");
    std::string line, head;
    std::vector<std::pair<long, std::string>> big;
    while (std::getline(sm, line)) {
      if (!line.empty() && std::isxdigit(static_cast<unsigned char>(line[0])) && line.find('-') < 17)
        head = line;
      else if (line.rfind("Rss:", 0) == 0)
        big.push_back({std::stol(line.substr(4)), head});
    }
    std::sort(big.rbegin(), big.rend());
    for (std::size_t k = 0; k < big.size() && k < 8; ++k)
      std::printf("smaps: %8ld kB  %s\n", big[k].first, big[k].second.c_str());
  }
  if (!std::getenv("LOADTRIM_SOAK_KEEP"))
    fs::remove_all(base);
  else
    std::printf("soak: session logs kept in %s\n", base.c_str());

  std::printf("soak: %d sessions, 1000 Hz, time scale %d%s\n", n, scale,
              kAsan ? ", AddressSanitizer build" : "");
  std::printf("%8s %10s %11s %10s %9s %9s %11s %6s %9s %11s\n", "session", "tool_kiB", "tool_heap", "sim_kiB",
              "tool_fds", "sim_fds", "samples", "lost", "rejected", "coastdowns");
  for (const auto& r : rows)
    if (r.session <= 3 || r.session % 10 == 0 || r.session == n || n <= 20)
      std::printf("%8d %10ld %11ld %10ld %9ld %9ld %11llu %6llu %9llu %11d\n", r.session, r.tool_rss,
                  r.tool_heap, r.sim_rss, r.tool_fds, r.sim_fds, static_cast<unsigned long long>(r.received),
                  static_cast<unsigned long long>(r.lost), static_cast<unsigned long long>(r.rejected),
                  r.coastdowns);
  ASSERT_EQ(static_cast<int>(rows.size()), n);
  // Memory: the median over sessions 3..12 against the median over the last ten (the first sessions fill
  // allocator caches and lazy statics; single sessions with longer traces raise RSS briefly, a median ignores
  // them). A leak shows as a steady rise between the two windows.
  auto median = [&](std::size_t from, std::size_t to, long Row::*field) {
    std::vector<long> v;
    for (std::size_t k = from; k < to && k < rows.size(); ++k) v.push_back(rows[k].*field);
    std::nth_element(v.begin(), v.begin() + static_cast<long>(v.size() / 2), v.end());
    return v[v.size() / 2];
  };
  const std::size_t early_from = 2, early_to = std::min<std::size_t>(12, rows.size());
  const std::size_t late_from = rows.size() > 10 ? rows.size() - 10 : 0;
  const long d_tool =
      median(late_from, rows.size(), &Row::tool_rss) - median(early_from, early_to, &Row::tool_rss);
  const long d_sim =
      median(late_from, rows.size(), &Row::sim_rss) - median(early_from, early_to, &Row::sim_rss);
  const long d_heap =
      median(late_from, rows.size(), &Row::tool_heap) - median(early_from, early_to, &Row::tool_heap);
  std::printf(
      "soak: median change, sessions 3-12 to the last 10: tool heap in use %+ld kiB, tool RSS %+ld kiB, "
      "simulator RSS "
      "%+ld kiB\n",
      d_heap, d_tool, d_sim);
  if (!kAsan) {
    // Bounds: common practice, no source. A leak is memory still allocated: the tool's heap in use over all
    // arenas must not grow by more than 512 KiB. The tool's RSS also counts what the allocator keeps for
    // reuse after malloc_trim (pages of multi-MB trace buffers pinned by small live chunks, more of them when
    // a loaded host lets backlogs grow), so it only gets a gross bound; the simulator, a single-threaded
    // long-lived process, gets the tight one.
    EXPECT_GE(rows.back().tool_heap, 0) << "malloc_info could not be read";
    EXPECT_LE(d_heap, 512);
    EXPECT_LE(d_tool,
              32768);  // a kept 1 kHz trace per session (~5 MB each) would pass this within a few sessions
    // The simulator's send queue keeps the high-water mark of a backlog (a step, not a slope): alone it grows
    // by about 2 MiB, but under a parallel ctest run the tool is starved and the backlog of this
    // 200,000-lines-per-second stream reached 6 and 12 MiB in two runs on the 2-core workplace machine.
    // Gross, like the tool's RSS.
    EXPECT_LE(d_sim, 32768);
  }
}
