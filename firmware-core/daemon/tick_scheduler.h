// The daemon's data-time scheduler is the file tools' one (reorder window,
// tick rule, lead guard): io/replay_driver.h, holdfast::TickScheduler. One
// implementation, so that holdfastd, `holdfast replay` and `holdfast balance`
// give the same events on the same readings.
#pragma once

#include "replay_driver.h"

namespace holdfast::daemon {

using TickScheduler = holdfast::TickScheduler;

}  // namespace holdfast::daemon
