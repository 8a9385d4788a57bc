#include <unistd.h>

#include <cstdio>
#include <cstdlib>
#include <filesystem>

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
                "next tick); of these excluded: bad_quality=%llu out_of_range=%llu rate_of_change=%llu spike=%llu (of %llu "
                "jumps held back one reading); ignored: "
                "out_of_order=%llu duplicate=%llu unknown_point=%llu not_finite=%llu",
                static_cast<unsigned long long>(c.accepted + c.late), static_cast<unsigned long long>(c.accepted),
                static_cast<unsigned long long>(c.late), static_cast<unsigned long long>(c.bad_quality),
                static_cast<unsigned long long>(c.out_of_range), static_cast<unsigned long long>(c.rate_of_change),
                static_cast<unsigned long long>(c.spike), static_cast<unsigned long long>(c.held_back),
                static_cast<unsigned long long>(c.out_of_order), static_cast<unsigned long long>(c.duplicate),
                static_cast<unsigned long long>(c.unknown_point), static_cast<unsigned long long>(c.not_finite));
  return buf;
}

#ifndef HOLDFAST_SOURCE_TOOLS_DIR
#define HOLDFAST_SOURCE_TOOLS_DIR "tools"
#endif

bool FindToolScript(const std::string& name, std::string* path, std::string* tried) {
  namespace fs = std::filesystem;
  std::vector<fs::path> candidates;
  std::error_code ec;
  const fs::path exe = fs::read_symlink("/proc/self/exe", ec);
  if (!ec && !exe.empty()) {
    candidates.push_back(exe.parent_path().parent_path() / "share" / "holdfast" / name);
    candidates.push_back(exe.parent_path() / name);
  }
  candidates.push_back(fs::path(HOLDFAST_SOURCE_TOOLS_DIR) / name);
  tried->clear();
  for (const fs::path& c : candidates) {
    if (fs::is_regular_file(c, ec)) {
      *path = c.string();
      return true;
    }
    if (!tried->empty()) *tried += ", ";
    *tried += c.string();
  }
  return false;
}

int RunPython(const std::string& script, const std::vector<std::string>& args) {
  auto quote = [](const std::string& s) {
    std::string q = "'";
    for (char c : s) q += c == '\'' ? std::string("'\\''") : std::string(1, c);
    return q + "'";
  };
  std::string cmd = ::access("/usr/bin/python3", X_OK) == 0 ? "/usr/bin/python3" : "python3";
  cmd += " " + quote(script);
  for (const std::string& a : args) cmd += " " + quote(a);
  const int rc = std::system(cmd.c_str());
  return rc == 0 ? 0 : (rc == -1 ? 127 : (WIFEXITED(rc) ? WEXITSTATUS(rc) : 128));
}

}  // namespace holdfast::cli
