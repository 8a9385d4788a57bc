// Subcommand registration for the host command. A subcommand file defines a
// function `void Register(CLI::App& app, int* exit_code)` that adds itself and
// sets *exit_code from its callback, and adds it with HOLDFAST_REGISTER_COMMAND.
#pragma once

#include <functional>
#include <string>
#include <vector>

#include <CLI/CLI.hpp>

#include "holdfast/aligner.h"
#include "holdfast/site.h"

namespace holdfast::cli {

using RegisterFn = std::function<void(CLI::App&, int*)>;
std::vector<RegisterFn>& Registry();

struct Registrar {
  explicit Registrar(RegisterFn fn) { Registry().push_back(std::move(fn)); }
};

// Loads a site file for a command; on failure prints every problem (file and
// JSON pointer) and a hint to run check-config on standard error, and
// returns false (the command then exits 2).
bool LoadSiteOrSay(const std::string& path, Site* site);

// The aligner's counters in words for a command's summary. The core's
// `late` counter (a reading stamped at or before a tick already computed) is
// shown as `after_tick`: such readings are not rejected, they are held and
// used from the next tick on (README, "Readings file").
std::string ReadingCounts(const AlignerCounters& c);

// Finds a helper script (e.g. "evaluate-report.py"): installed beside the
// executable (<exe>/../share/holdfast/NAME, then <exe>/NAME), else in the
// source tree's tools/ this binary was built from. Returns false and lists
// the places tried in *tried.
bool FindToolScript(const std::string& name, std::string* path, std::string* tried);

// Runs `python3 SCRIPT ARGS...` (arguments shell-quoted); the exit status.
int RunPython(const std::string& script, const std::vector<std::string>& args);

}  // namespace holdfast::cli

#define HOLDFAST_REGISTER_COMMAND(fn) \
  static ::holdfast::cli::Registrar holdfast_registrar_##fn(fn)
