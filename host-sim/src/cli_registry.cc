#include <cstdio>

#include "cli_commands.h"
#include "site_file.h"

namespace holdfast::cli {

std::vector<RegisterFn>& Registry() {
  static std::vector<RegisterFn> registry;
  return registry;
}

bool LoadSiteOrSay(const std::string& path, Site* site) {
  std::vector<ConfigProblem> problems;
  if (LoadSiteFile(path, site, &problems)) return true;
  for (const auto& p : problems) std::fprintf(stderr, "%s\n", p.ToString().c_str());
  std::fprintf(stderr, "%zu problem(s) in %s; run 'holdfast check-config %s'\n", problems.size(), path.c_str(),
               path.c_str());
  return false;
}

std::string ReadingCounts(const AlignerCounters& c) {
  char buf[512];
  std::snprintf(buf, sizeof buf,
                "taken %llu (on_time %llu, after_tick %llu: arrived after their tick was computed, used from the "
                "next tick); of these excluded: bad_quality=%llu out_of_range=%llu rate_of_change=%llu; ignored: "
                "out_of_order=%llu duplicate=%llu unknown_point=%llu not_finite=%llu",
                static_cast<unsigned long long>(c.accepted + c.late), static_cast<unsigned long long>(c.accepted),
                static_cast<unsigned long long>(c.late), static_cast<unsigned long long>(c.bad_quality),
                static_cast<unsigned long long>(c.out_of_range), static_cast<unsigned long long>(c.rate_of_change),
                static_cast<unsigned long long>(c.out_of_order), static_cast<unsigned long long>(c.duplicate),
                static_cast<unsigned long long>(c.unknown_point), static_cast<unsigned long long>(c.not_finite));
  return buf;
}

}  // namespace holdfast::cli
