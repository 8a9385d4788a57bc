// `holdfast report`: a self-contained HTML page (plots inlined as data URIs)
// from a `balance` run, with the alarm events of that run or of a `replay`
// of the same readings, and optionally the simulator's truth.json:
//
//   holdfast balance --config SITE --data R.csv --out rows.csv --events events.jsonl
//   holdfast report --config SITE --balance rows.csv --events events.jsonl [--truth truth.json] --out page.html
//
// The command checks its inputs, writes the segment geometry compiled from
// the site (profile, transmitters, meters, landmarks; SI) to a temporary
// JSON file and renders the page with tools/holdfast-report.py (matplotlib).
#include <unistd.h>

#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <memory>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "cli_commands.h"

namespace holdfast::cli {
namespace {

struct ReportArgs {
  std::string config, balance, events, truth, out = "report.html", segment, title, script;
};

nlohmann::ordered_json Geometry(const Site& site) {
  nlohmann::ordered_json doc;
  doc["format"] = "holdfast-report-geometry/1";
  doc["site"] = site.name;
  nlohmann::ordered_json segs = nlohmann::ordered_json::array();
  for (const SegmentSpec& s : site.segments) {
    nlohmann::ordered_json j;
    j["id"] = s.id;
    j["name"] = s.name;
    j["length_m"] = s.length_m();
    j["nominal_flow_kg_s"] = s.nominal_flow_kg_s;
    nlohmann::ordered_json prof = nlohmann::ordered_json::array();
    for (const ElevationPoint& p : s.profile) prof.push_back({p.chainage_m, p.elevation_m});
    j["profile"] = prof;
    auto gauges = [&](const std::vector<GaugeSpec>& list) {
      nlohmann::ordered_json a = nlohmann::ordered_json::array();
      for (const GaugeSpec& g : list)
        a.push_back({{"point", site.points[g.point].id}, {"chainage_m", g.chainage_m}, {"elevation_m", g.elevation_m}});
      return a;
    };
    j["pressure_points"] = gauges(s.pressure_gauges);
    j["temperature_points"] = gauges(s.temperature_gauges);
    nlohmann::ordered_json meters = nlohmann::ordered_json::array();
    for (const MeterSpec& m : s.meters)
      meters.push_back({{"point", site.points[m.point].id}, {"role", MeterRoleName(m.role)}, {"chainage_m", m.chainage_m}});
    j["meters"] = meters;
    nlohmann::ordered_json marks = nlohmann::ordered_json::array();
    for (const LandmarkSpec& l : s.landmarks) marks.push_back({{"name", l.name}, {"chainage_m", l.chainage_m}});
    j["landmarks"] = marks;
    nlohmann::ordered_json tanks = nlohmann::ordered_json::array();
    for (const TankSpec& t : s.tanks) tanks.push_back(t.id);
    j["tanks"] = tanks;
    segs.push_back(j);
  }
  doc["segments"] = segs;
  return doc;
}

int RunReport(const ReportArgs& a) {
  Site site;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  if (!a.segment.empty()) {
    bool found = false;
    for (const SegmentSpec& s : site.segments) found = found || s.id == a.segment;
    if (!found) {
      std::fprintf(stderr, "--segment: no segment '%s' in %s\n", a.segment.c_str(), a.config.c_str());
      return 2;
    }
  }
  // The balance rows must be the CSV that `holdfast balance` writes.
  {
    std::ifstream in(a.balance);
    std::string header;
    if (!in || !std::getline(in, header)) {
      std::fprintf(stderr, "--balance: %s: cannot read the file\n", a.balance.c_str());
      return 2;
    }
    if (header.rfind("time,segment,status,", 0) != 0) {
      std::fprintf(stderr, "--balance: %s: not the CSV of 'holdfast balance' (--format csv); its header starts "
                   "'time,segment,status,'\n", a.balance.c_str());
      return 2;
    }
  }
  for (const auto& [name, path] : {std::make_pair("--events", &a.events), std::make_pair("--truth", &a.truth)}) {
    if (!path->empty() && !std::ifstream(*path)) {
      std::fprintf(stderr, "%s: %s: cannot read the file\n", name, path->c_str());
      return 2;
    }
  }
  std::string script = a.script, tried;
  if (script.empty() && !FindToolScript("holdfast-report.py", &script, &tried)) {
    std::fprintf(stderr, "report: holdfast-report.py not found (tried %s); give it with --report-script\n",
                 tried.c_str());
    return 1;
  }
  namespace fs = std::filesystem;
  std::error_code ec;
  const fs::path geometry =
      fs::temp_directory_path(ec) / ("holdfast-report-" + std::to_string(::getpid()) + ".json");
  {
    std::ofstream g(geometry);
    g << Geometry(site).dump(1) << "\n";
    if (!g) {
      std::fprintf(stderr, "report: cannot write %s\n", geometry.string().c_str());
      return 1;
    }
  }
  std::vector<std::string> args = {"--geometry", geometry.string(), "--balance", a.balance, "--out", a.out};
  if (!a.events.empty()) args.insert(args.end(), {"--events", a.events});
  if (!a.truth.empty()) args.insert(args.end(), {"--truth", a.truth});
  if (!a.segment.empty()) args.insert(args.end(), {"--segment", a.segment});
  args.insert(args.end(), {"--title", a.title.empty() ? site.name : a.title});
  const int rc = RunPython(script, args);
  fs::remove(geometry, ec);
  if (rc != 0) {
    std::fprintf(stderr, "report: %s failed (status %d); it needs python3-matplotlib\n", script.c_str(), rc);
    return rc == 2 ? 2 : 1;
  }
  std::printf("report: %s\n", a.out.c_str());
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<ReportArgs>();
  CLI::App* cmd = app.add_subcommand(
      "report", "A self-contained HTML page of a balance run: imbalance and MDL, detector, inventory, the line");
  cmd->add_option("--config", args->config, "Site config (JSON)")->required()->check(CLI::ExistingFile);
  cmd->add_option("--balance", args->balance, "Rows from 'holdfast balance --format csv' (any --every)")->required();
  cmd->add_option("--events", args->events, "Alarm events (JSON Lines) from 'balance --events' or 'replay --events'");
  cmd->add_option("--truth", args->truth, "truth.json from 'holdfast sim' (or the demo's) to draw what happened");
  cmd->add_option("--out", args->out, "The HTML page to write")->capture_default_str();
  cmd->add_option("--segment", args->segment, "Only this segment (default: every segment in the rows)");
  cmd->add_option("--title", args->title, "Page title (default: the site name)");
  cmd->add_option("--report-script", args->script,
                  "The page script (default: installed beside holdfast, else the source tree's tools/)");
  cmd->callback([args, exit_code] { *exit_code = RunReport(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
