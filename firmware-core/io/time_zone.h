// Local time at the boundary: turns a district's time zone into the compiled
// UTC-offset schedule the core uses (water::UtcOffsetSchedule).
//
//   * An IANA zone name ("Europe/London") is read from the system tz
//     database: the TZif file under $TZDIR or /usr/share/zoneinfo (RFC 8536;
//     the version 2+ 64-bit data, and its footer rule for times after the
//     last transition).
//   * Anything else is parsed as a POSIX TZ rule (IEEE Std 1003.1, 8.3 "TZ"),
//     e.g. "GMT0BST,M3.5.0/1,M10.5.0" or "CET-1CEST,M3.5.0,M10.5.0/3";
//     note the POSIX sign: hours WEST of Greenwich are positive.
// The schedule covers [from_s - 1 year, to_s + 1 year] (it is a list of
// transitions, so a generous span costs a few hundred bytes).
#pragma once

#include <string>

#include "holdfast/water.h"

namespace holdfast {

bool BuildOffsetSchedule(const std::string& zone, double from_s, double to_s, water::UtcOffsetSchedule* out,
                         std::string* why);

// Parses a POSIX TZ rule into transitions over [from_s, to_s].
bool PosixTzSchedule(const std::string& rule, double from_s, double to_s, water::UtcOffsetSchedule* out,
                     std::string* why);

// Days since 1970-01-01 of a proleptic Gregorian date (Hinnant's
// days_from_civil algorithm).
int64_t DaysFromCivil(int64_t y, unsigned m, unsigned d);

}  // namespace holdfast
