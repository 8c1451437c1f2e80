// Reading a session's own log back: where an interrupted session stood (for `loadtrim resume`) and the
// summary of one whose verdict the log already holds. Pure: the records are passed in, as record::read_log
// gives them; they are read by the field names the event mappings (session/events.hpp) write.
#pragma once

#include <nlohmann/json.hpp>
#include <optional>
#include <string>
#include <vector>

#include "core/profile.hpp"
#include "core/setting.hpp"
#include "session/events.hpp"

namespace loadtrim::session {

// What a resumed session takes over from its log.
struct ResumePoint {
  std::vector<nlohmann::json> completed;  // "coastdown" records, in order
  int unusable = 0;   // unusable and discarded runs (both count against limits.max_unusable_runs)
  int discarded = 0;  // of which discarded (lost link, too little retarding force, released late)
  int last_run = 0;   // the highest run number any record names (a repeat gets the next one)
  std::optional<int> discarded_run;  // a run started but not completed
  core::RoadLoad next_set;
  bool have_next_set = false;
  std::string strategy;
  double cell_time_s = 0.0;    // controller time used before the interruption
  int malformed = 0;           // records that could not be read as this version writes them
  std::string malformed_note;  // the first of them: "record N (type): what is missing"; resume refuses
  // A result the record already holds (the method's verdict in a coast-down record, a refusal, or a final
  // "finished" record) when the process ended before the folder was sealed: resume finalises it without
  // motoring and never runs another coast-down.
  std::optional<Outcome> verdict;
  std::string verdict_reason;
  std::optional<core::RoadLoad> final_set;  // as the decision gave it (not yet rounded)
  bool finished_recorded = false;  // the final "finished" record (and summary.json) is already written
  int iterations = 0;              // distinct settings written
  std::optional<core::RoadLoad>
      last_written;  // the last set_written record's setting (the step limit's base)
  // The setting the last usable coast-down record adjusted to, when its decision was "run again" (for the
  // envelope's message on a refused first adjustment, as the session that wrote it would give it).
  std::optional<core::RoadLoad> last_adjusted_to;
  // For each "passes_reset" record, how many "coastdown" records came before it: where the session gave up
  // its consecutive passes (a discarded or unusable run, a pause, a setting adjusted after a pass), for the
  // replay.
  std::vector<std::size_t> passes_reset_before;
};

// Rebuilds where a session stood from its log records. A record whose fields are not what this version
// writes is counted and named (malformed, malformed_note; resume refuses it), never a crash.
ResumePoint resume_point(const std::vector<nlohmann::json>& records);

// A folder whose profile takes each adjustment's loss from the whole-trace curve (method.adjust_from,
// docs/standards.md §3.17) wrote the curve it used with every usable coast-down; the resume replays the
// method from it. The first usable record without it (damage, not an old folder: an old folder's own profile
// copy keeps the band regression), named; nullopt when there is none. Resume refuses before anything is
// written.
std::optional<std::string> missing_adjustment(const ResumePoint& rp, const core::Profile& profile);
// Replays the setting method over the completed coast-downs as the session took them: each usable run's
// verdict, the passes the session gave up where its log says so, and a setting changed after a pass (the
// next-pass rule, docs/standards.md §3.19; the setting for the vehicle fully warm, §3.18), after which no
// pass counts. So the passes a resume finds in hand are the ones the session had.
void replay_method(const ResumePoint& p, core::SettingMethodState& method);
// The summary of a session whose verdict the record already holds (ResumePoint::verdict), from the record
// alone.
Summary summary_from_record(const ResumePoint& p, const core::Profile& profile);

}  // namespace loadtrim::session
