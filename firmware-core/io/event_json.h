// The one serialisation of an alarm event: a single-line JSON object, the
// record of every JSON Lines event stream Holdfast writes (`holdfast balance
// --events`, `holdfast replay`, and later the daemon's journal). Fields, in
// this order (config/REPLAY.md, "Alarm events"):
//
//   time            event time, ISO 8601 UTC with milliseconds ("2026-03-14T08:16:06.000Z")
//   segment         segment id from the site config
//   type            leak | rupture | data_quality | balance_unavailable
//   state           state after the transition: normal | unack_active | ack_active |
//                   unack_returned | shelved | suppressed | out_of_service
//   from            state before the transition (same names)
//   cause           condition_raised | condition_cleared | acknowledged | shelved |
//                   unshelved | shelve_expired | suppressed | unsuppressed |
//                   removed_from_service | returned_to_service | latched_reset
//   priority        low | medium | high | urgent
//   seq             event sequence number of the monitor (from 1, no gaps unless
//                   the monitor's ring overflowed)
//   leak_rate_kg_s  estimated leak rate at the event, kg/s, 6 decimals; null when unknown
//   location_m      estimated leak chainage from the segment inlet, m, 1 decimal; null when unknown
//   statistic       detector statistic, 4 decimals; null when unknown
//   threshold       its alarm threshold, 4 decimals; null when unknown
//   statistic_unit  unit of statistic and threshold: block_sigma (leak, rupture: CUSUM of
//                   block residuals standardised by the learnt block sigma), points
//                   (data_quality: unusable points); null when statistic is null
//   window_s        balance window behind the evidence, s, 1 decimal; null when unknown
//   user            operator for operator commands, "" otherwise
//
// Numbers are printed with the C locale's printf; non-finite numbers are
// null. Strings are JSON-escaped (quote, backslash and control characters).
#pragma once

#include <string>
#include <string_view>

#include "holdfast/alarm.h"
#include "holdfast/site.h"

namespace holdfast {

// The event as one JSON object, without a trailing newline.
std::string EventJson(const Site& site, const AlarmEvent& event);
// Appends the same text to *out.
void AppendEventJson(const Site& site, const AlarmEvent& event, std::string* out);

// The unit of an event's statistic and threshold for an alarm type (above).
const char* StatisticUnit(AlarmType type);

// Appends `text` as a JSON string literal, quotes included.
void AppendJsonString(std::string_view text, std::string* out);

}  // namespace holdfast
