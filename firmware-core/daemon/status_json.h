// Retained per-segment documents the daemon publishes (config/DAEMON.md).
#pragma once

#include <string>

#include "holdfast/monitor.h"

namespace holdfast::daemon {

// P/alarms/<segment>: {"segment", "time", "alarms": {"leak": {"state",
// "condition_active", "priority", "shelved_until"}, ...}, "next_seq"}.
std::string AlarmStateJson(const Monitor& monitor, int segment);

// P/status/<segment>: data time, status, flags, flows, line pack, inventory,
// residual, per window the imbalance, its uncertainty and the minimum
// detectable leak, the decision state, and the data-quality state.
std::string SegmentStatusJson(const Monitor& monitor, int segment);

}  // namespace holdfast::daemon
