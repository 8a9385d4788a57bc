// `holdfast balance`: run a site config and a readings file through the core
// and write one balance row per tick and segment (CSV or JSON Lines).
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "cli_commands.h"
#include "event_json.h"
#include "holdfast/monitor.h"
#include "readings_csv.h"
#include "replay_driver.h"
#include "site_file.h"
#include "tuning_file.h"

namespace holdfast::cli {
namespace {

struct BalanceArgs {
  std::string config, data, out = "-", format = "csv", segment, events, tuning;
  int every = 1;
  // Data time as holdfastd keeps it (config/REPLAY.md).
  double reorder_window_s = kDefaultReorderWindow_s, max_lead_s = kDefaultMaxLead_s;
  int lead_quorum = kDefaultLeadQuorumPoints;
};

std::string Num(double v, const char* fmt = "%.6f") {
  if (!std::isfinite(v)) return "null";
  char buf[64];
  std::snprintf(buf, sizeof buf, fmt, v);
  return buf;
}

// One CSV field (RFC 4180, section 2): quoted when it holds a comma, a
// double quote or a line break, with inner quotes doubled.
std::string CsvField(const std::string& v) {
  if (v.find_first_of(",\"\r\n") == std::string::npos) return v;
  std::string out = "\"";
  for (char c : v) {
    if (c == '"') out += '"';
    out += c;
  }
  return out + "\"";
}

// The flags of a tick joined with '|' (the core joins them with commas),
// so that the CSV field needs no quoting and splits on one character.
std::string PipeFlags(uint32_t flags) {
  std::string s = SegmentFlagNames(flags);
  for (char& c : s) {
    if (c == ',') c = '|';
  }
  return s;
}

void WriteHeader(std::FILE* f, const BalanceArgs& a, const SegmentTick& t) {
  if (a.format != "csv") return;
  std::fprintf(f, "time,segment,status,inflow_kg_s,outflow_kg_s,linepack_kg,tank_kg,inventory_kg,"
                  "inventory_rate_kg_s,residual_kg_s,mean_pressure_pa,mean_temperature_k");
  for (int i = 0; i < t.window_count; ++i) {
    const long w = std::lround(t.windows[i].window_s);
    std::fprintf(f, ",covered_%lds_s,imbalance_%lds_kg,imbalance_%lds_kg_s,sigma_%lds_kg,mdl_%lds_kg_s", w, w, w, w, w);
  }
  std::fprintf(f, ",decision,bias_kg_s,sigma_kg_s,leak_rate_kg_s,leak_statistic,leak_threshold,location_m,"
                  "location_low_m,location_high_m,leak_alarm,flags\n");
}

void WriteRow(std::FILE* f, const BalanceArgs& a, const std::string& seg, const SegmentTick& t) {
  const std::string time = FormatIsoUtc(t.time_s, 3);
  if (a.format == "csv") {
    const std::string flags = CsvField(PipeFlags(t.flags));
    std::fprintf(f, "%s,%s,%s,%.6f,%.6f,%.3f,%.3f,%.3f,%.6f,%.6f,%.1f,%.4f", time.c_str(), CsvField(seg).c_str(),
                 SegmentStatusName(t.status), t.inflow_kg_s, t.outflow_kg_s, t.linepack_kg, t.tank_kg,
                 t.inventory_kg, t.inventory_rate_kg_s, t.residual_kg_s, t.mean_pressure_pa,
                 t.mean_temperature_k);
    for (int i = 0; i < t.window_count; ++i) {
      const WindowResult& w = t.windows[i];
      std::fprintf(f, ",%.1f,%.3f,%.6f,%.3f,%.6f", w.covered_s, w.imbalance_kg, w.imbalance_kg_s, w.sigma_kg,
                   w.mdl_kg_s);
    }
    const DecisionResult& d = t.decision;
    const bool lead = t.decision_enabled && d.leading >= 0;
    std::fprintf(f, ",%s,%s,%s,%s,%s,%s,%s,%s,%s,%s,%s\n", t.decision_enabled ? DecisionStateName(d.state) : "",
                 t.decision_enabled ? Num(d.bias_kg_s).c_str() : "", t.decision_enabled ? Num(d.sigma_kg_s).c_str() : "",
                 lead ? Num(d.leak_rate_kg_s).c_str() : "", lead ? Num(d.detectors[d.leading].statistic, "%.3f").c_str() : "",
                 lead ? Num(d.detectors[d.leading].h, "%.3f").c_str() : "",
                 t.location.valid ? Num(t.location.chainage_m, "%.0f").c_str() : "",
                 t.location.valid ? Num(t.location.low_m, "%.0f").c_str() : "",
                 t.location.valid ? Num(t.location.high_m, "%.0f").c_str() : "",
                 AlarmStateName(t.alarms[static_cast<int>(AlarmType::kLeak)]), flags.c_str());
    return;
  }
  std::fprintf(f,
               "{\"time\":\"%s\",\"segment\":%s,\"status\":\"%s\",\"inflow_kg_s\":%.6f,\"outflow_kg_s\":%.6f,"
               "\"linepack_kg\":%.3f,\"tank_kg\":%.3f,\"inventory_kg\":%.3f,\"inventory_rate_kg_s\":%.6f,"
               "\"residual_kg_s\":%.6f,\"mean_pressure_pa\":%.1f,\"mean_temperature_k\":%.4f,\"windows\":[",
               time.c_str(), nlohmann::json(seg).dump().c_str(), SegmentStatusName(t.status), t.inflow_kg_s, t.outflow_kg_s,
               t.linepack_kg, t.tank_kg, t.inventory_kg, t.inventory_rate_kg_s, t.residual_kg_s,
               t.mean_pressure_pa, t.mean_temperature_k);
  for (int i = 0; i < t.window_count; ++i) {
    const WindowResult& w = t.windows[i];
    std::fprintf(f,
                 "%s{\"window_s\":%g,\"covered_s\":%.1f,\"imbalance_kg\":%.3f,\"imbalance_kg_s\":%.6f,"
                 "\"sigma_kg\":%.3f,\"mdl_kg_s\":%.6f}",
                 i ? "," : "", w.window_s, w.covered_s, w.imbalance_kg, w.imbalance_kg_s, w.sigma_kg, w.mdl_kg_s);
  }
  const DecisionResult& d = t.decision;
  const bool lead = t.decision_enabled && d.leading >= 0;
  std::fprintf(f, "],\"decision\":%s%s%s,\"leak_rate_kg_s\":%s,\"location_m\":%s,\"leak_alarm\":\"%s\",\"flags\":%s}\n",
               t.decision_enabled ? "\"" : "", t.decision_enabled ? DecisionStateName(d.state) : "null",
               t.decision_enabled ? "\"" : "", lead ? Num(d.leak_rate_kg_s).c_str() : "null",
               t.location.valid ? Num(t.location.chainage_m, "%.1f").c_str() : "null",
               AlarmStateName(t.alarms[static_cast<int>(AlarmType::kLeak)]),
               nlohmann::json(SegmentFlagNames(t.flags)).dump().c_str());
}

// --reorder-window-s, --max-lead-s, --lead-quorum: data time as holdfastd
// keeps it, with the daemon's defaults (config/REPLAY.md).
void AddDataTimeOptions(CLI::App* cmd, double* reorder_window_s, double* max_lead_s, int* lead_quorum) {
  cmd->add_option("--reorder-window-s", *reorder_window_s,
                  "Reorder window, s of data time (holdfastd's tick_lateness_s; negative: feed in file order)")
      ->capture_default_str();
  cmd->add_option("--max-lead-s", *max_lead_s,
                  "Quarantine a reading stamped more than this ahead of data time (0: off)")
      ->capture_default_str()->check(CLI::NonNegativeNumber);
  cmd->add_option("--lead-quorum", *lead_quorum, "Points that must agree to move data time past the lead")
      ->capture_default_str()->check(CLI::PositiveNumber);
}

int RunBalance(const BalanceArgs& a) {
  Site site;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  int only = -1;
  if (!a.segment.empty()) {
    for (size_t i = 0; i < site.segments.size(); ++i)
      if (site.segments[i].id == a.segment) only = static_cast<int>(i);
    if (only < 0) {
      std::fprintf(stderr, "--segment: no segment '%s' in %s\n", a.segment.c_str(), a.config.c_str());
      return 2;
    }
  }
  Monitor monitor;
  std::string why;
  if (!monitor.Init(site, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.config.c_str(), why.c_str());
    return 2;
  }
  if (!a.tuning.empty()) {
    TuningFile tuning;
    if (!LoadTuningFile(a.tuning, site, &tuning, &why) || !ApplyTuning(tuning, &monitor, &why)) {
      std::fprintf(stderr, "%s\n", why.c_str());
      return 2;
    }
  }
  ReadingsCsvReader reader;
  if (!reader.Open(a.data, site, &why)) {
    std::fprintf(stderr, "%s\n", why.c_str());
    return 2;
  }
  std::FILE* out = stdout;
  if (a.out != "-") {
    out = std::fopen(a.out.c_str(), "w");
    if (!out) {
      std::fprintf(stderr, "--out: cannot write %s\n", a.out.c_str());
      return 2;
    }
  }
  std::FILE* events = nullptr;
  if (!a.events.empty()) {
    events = a.events == "-" ? stdout : std::fopen(a.events.c_str(), "w");
    if (!events) {
      std::fprintf(stderr, "--events: cannot write %s\n", a.events.c_str());
      return 2;
    }
  }
  // The shared tick loop (replay_driver.h): events first, then the rows of
  // the tick, so that both may go to standard output in a stable order.
  ReplayOptions options;
  options.reorder_window_s = a.reorder_window_s >= 0.0 ? a.reorder_window_s : kNaN;
  options.max_lead_s = a.max_lead_s;
  options.lead_quorum_points = a.lead_quorum;
  if (!options.IsValid(&why)) {
    std::fprintf(stderr, "--reorder-window-s/--max-lead-s: %s\n", why.c_str());
    return 2;
  }
  options.on_event = [&](const AlarmEvent& e) {
    if (events) std::fprintf(events, "%s\n", EventJson(site, e).c_str());
  };
  bool header = false;
  uint64_t ticks = 0;
  options.on_tick = [&](double) {
    if (ticks++ % static_cast<uint64_t>(a.every) != 0) return true;
    for (int s = 0; s < monitor.segment_count(); ++s) {
      if (only >= 0 && s != only) continue;
      if (!header) { WriteHeader(out, a, monitor.segment(s)); header = true; }
      WriteRow(out, a, site.segments[s].id, monitor.segment(s));
    }
    return true;
  };
  CsvReadingSource source(&reader);
  const ReplayResult run = RunReplay(&monitor, &source, site.tick_s, options);
  const uint64_t event_count = run.events;
  if (run.quarantined > 0 || run.gaps_jumped > 0)
    std::fprintf(stderr, "data time: %s\n", run.ToString().c_str());
  if (out != stdout) std::fclose(out);
  if (events && events != stdout) std::fclose(events);
  std::fprintf(stderr, "%s: %llu rows, %llu bad; %llu ticks; readings %s\n", reader.path().c_str(),
               static_cast<unsigned long long>(reader.rows()), static_cast<unsigned long long>(reader.bad_rows()),
               static_cast<unsigned long long>(ticks), ReadingCounts(monitor.counters()).c_str());
  std::fprintf(stderr, "%llu alarm event(s)%s\n", static_cast<unsigned long long>(event_count),
               a.events.empty() ? " (write them with --events FILE)" : "");
  for (const auto& e : reader.errors())
    std::fprintf(stderr, "%s:%llu: %s\n", reader.path().c_str(), static_cast<unsigned long long>(e.line),
                 e.message.c_str());
  if (reader.bad_rows() > reader.errors().size())
    std::fprintf(stderr, "... and %llu more bad rows\n",
                 static_cast<unsigned long long>(reader.bad_rows() - reader.errors().size()));
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<BalanceArgs>();
  CLI::App* cmd = app.add_subcommand("balance", "Run a readings file through the core; write per-tick balance rows");
  cmd->add_option("--config", args->config, "Site config (JSON)")->required()->check(CLI::ExistingFile);
  cmd->add_option("--data", args->data, "Readings CSV (time,point,value,quality); - for stdin")->required();
  cmd->add_option("--out", args->out, "Output file (default: standard output)");
  cmd->add_option("--format", args->format, "csv or jsonl")->check(CLI::IsMember({"csv", "jsonl"}));
  cmd->add_option("--every", args->every, "Write every Nth tick")->check(CLI::PositiveNumber);
  cmd->add_option("--segment", args->segment, "Only this segment id");
  cmd->add_option("--events", args->events, "Write alarm events as JSON Lines to this file (- for stdout)");
  cmd->add_option("--tuning", args->tuning, "Tuning file from 'holdfast tune' to seed the decision stage");
  AddDataTimeOptions(cmd, &args->reorder_window_s, &args->max_lead_s, &args->lead_quorum);
  cmd->callback([args, exit_code] { *exit_code = RunBalance(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
