// Site configuration: JSON document -> compiled Site (site.h).
// The format is documented in config/FORMAT.md. CompileSite never throws and
// never stops at the first problem: every problem is reported with its JSON
// path (RFC 6901 pointer, e.g. "/segments/0/sections/2/length_m") and reason.
#pragma once

#include <string>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "holdfast/site.h"

namespace holdfast {

struct ConfigProblem {
  std::string path;     // JSON pointer into the document ("" = the whole document)
  std::string message;  // what is wrong, in words a user can act on
  std::string ToString() const;  // "<path>: <message>"
};

// Returns true and fills `site` when the document is valid; otherwise returns
// false and appends every problem found to `problems` (site is then unspecified).
bool CompileSite(const nlohmann::json& doc, Site* site, std::vector<ConfigProblem>* problems);

// Size limits checked at config time, so that no accepted site can make a
// command run out of memory or overflow a fixed buffer. Each message names
// its bound. A 2000 km segment at the default 500 m reach has 4000 reaches;
// the line-pack update costs about 1.5 us per reach and tick (Release build,
// crude oil), so 200000 reaches keep a 1 s tick within a third of one core.
struct SiteLimits {
  static constexpr double kMaxSegmentLength_m = 2.0e6;     // one segment (all its sections): 2000 km
  static constexpr double kMinReachLength_m = 1.0;         // reach_length_m
  static constexpr long kMaxReachesPerSegment = 20000;     // sum over sections of ceil(length / reach)
  static constexpr long kMaxReachesPerSite = 200000;        // over all segments
  static constexpr long kMaxNodesPerSite = 220000;          // reach end points: reaches + sections, all segments
  static constexpr int kMaxSegments = 2000;
  static constexpr int kMaxSectionsPerSegment = 1000;
  static constexpr int kMaxMetersPerSegment = 64;          // the monitor's rupture locator holds 64 meters
  static constexpr int kMaxGaugesPerSegment = 1000;        // pressure and temperature points, each
  static constexpr int kMaxTanksPerSegment = 64;
  static constexpr int kMaxProfilePoints = 100000;         // elevation profile points per segment
  static constexpr int kMaxLandmarks = 10000;              // per segment
  static constexpr int kMaxStrappingRows = 10000;          // per strapping table
  static constexpr int kMaxPoints = 100000;                // per site
  static constexpr double kMinTick_s = 0.01;               // site tick
  static constexpr double kMaxTick_s = 3600.0;
  static constexpr double kMaxWindow_s = 366.0 * 86400.0;  // a balance window
};

// The format identifier this build reads ("holdfast-site/1").
const char* SiteFormatVersion();

}  // namespace holdfast
