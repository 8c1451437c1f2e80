// One human sentence per event, for the console and operator.log: numbers rounded to what a reader needs
// (and saying so where the record holds more), no JSON. The record (events.jsonl) and --json keep every
// digit; this is only how a person reads them.
#pragma once

#include <string>

#include "session/events.hpp"

namespace loadtrim::session {

// What the reader of a session's sentences has already been told: whether a controller ever answered
// (a failed connect moved nothing, so no sentence speaks of stopping rollers).
struct TextContext {
  bool connected = false;
};

// The sentence for an event (never empty, never a JSON object). Events without a sentence of their own are
// written as "<what>: key value, key value" with numbers rounded to 6 significant digits.
std::string event_sentence(const Event& e, const TextContext& ctx);

// When the first setting is not the strategy asked for: "fleet used, history asked for (<why>)", with where
// the history was looked for when that was the one asked for; "" when it is the one asked for.
std::string first_setting_fallback(const ev::FirstSetting& x);

// A number with a fixed count of decimals, never "-0.0".
std::string rounded(double v, int decimals);

// A state as the progress line shows it ("connecting", "warming up", ...).
const char* state_words(State s);

}  // namespace loadtrim::session
