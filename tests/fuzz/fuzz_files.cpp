// libFuzzer target: the file readers — trace CSV (then band analysis on what it read), EPA CSV, and the
// session log reader used by verify and resume (then the resume reconstruction). The input is written to a
// scratch file.
#include <unistd.h>

#include <cstdint>
#include <fstream>
#include <string>

#include "config/epa_csv.hpp"
#include "config/input_error.hpp"
#include "core/trace_analysis.hpp"
#include "record/event_log.hpp"
#include "record/session_folder.hpp"
#include "session/session.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  static const std::string path = "/tmp/loadtrim-fuzz-" + std::to_string(::getpid());
  {
    std::ofstream(path, std::ios::binary)
        .write(reinterpret_cast<const char*>(data), static_cast<std::streamsize>(size));
  }
  std::vector<double> t, v;
  std::string err;
  if (loadtrim::record::read_trace_csv(path, t, v, err)) {
    const std::vector<double> speeds = {20, 60, 100};
    loadtrim::core::analyse_bands({t, v}, speeds, 5.0, 1500.0);
  }
  try {
    loadtrim::config::read_epa_csv(path);
  } catch (const loadtrim::config::InputError&) {
  }
  std::vector<nlohmann::json> recs;
  const auto r = loadtrim::record::read_log(path, &recs);
  if (r.ok) loadtrim::session::resume_point(recs);
  return 0;
}
