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

}  // namespace holdfast::cli
