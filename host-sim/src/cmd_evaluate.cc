// `holdfast evaluate`: detection performance on simulated data (sim/evaluate.h;
// config/EVALUATE.md). Writes DIR/summary.md, summary.csv, runs.csv,
// evaluation.json, and DIR/report.html through tools/evaluate-report.py
// (matplotlib).
#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <memory>
#include <string>
#include <unistd.h>
#include <vector>

#include "atomic_file.h"
#include "cli_commands.h"
#include "evaluate.h"
#include "site_file.h"

namespace holdfast::cli {
namespace {

struct EvaluateArgs {
  std::string config, batch, out, report_script, family;  // report_script empty: FindToolScript
  std::string trace;  // per-minute CSV of the leak-free run (empty: none)
  int jobs = 0;
  bool no_report = false, quiet = false;
};


// Per-minute means of the leak-free run's balance and the decision's state,
// for finding out why a false alarm was raised.
class LeakFreeTrace {
 public:
  bool Open(const std::string& path) {
    f_ = std::fopen(path.c_str(), "w");
    if (f_ == nullptr) return false;
    std::fprintf(f_,
                 "time_s,status,decision,reduced_sensitivity,transient_ticks,leak_like_ticks,inflow_kg_s,outflow_kg_s,"
                 "inventory_rate_kg_s,residual_kg_s,linepack_kg,mean_temperature_k,bias_kg_s,sigma_kg_s,phi,"
                 "lead_ratio,lead_target_kg_s,volatility_scale\n");
    return true;
  }
  ~LeakFreeTrace() {
    if (f_ != nullptr) std::fclose(f_);
  }
  void Tick(const Monitor& m, int seg, double t) {
    const SegmentTick& st = m.segment(seg);
    // Every tick of the rupture condition, with its signals (for finding what
    // raised a rupture alarm in a leak-free run).
    if (st.rupture) std::fprintf(f_, "# rupture t=%.0f %s\n", t, st.rupture_status.ToString().c_str());
    ++n_;
    in_ += st.inflow_kg_s;
    out_ += st.outflow_kg_s;
    inv_ += st.inventory_rate_kg_s;
    res_ += st.residual_kg_s;
    transient_ += st.transient;
    leak_like_ += st.leak_like;
    if (t < next_s_) return;
    next_s_ = t + 60.0;
    const DecisionResult& d = st.decision;
    double ratio = 0.0, target = 0.0;
    for (int i = 0; i < d.detector_count; ++i) {
      const DetectorStatus& x = d.detectors[static_cast<size_t>(i)];
      if (x.h > 0.0 && x.statistic / x.h > ratio) {
        ratio = x.statistic / x.h;
        target = x.target_kg_s;
      }
    }
    const double n = static_cast<double>(n_);
    std::fprintf(f_, "%.0f,%s,%s,%d,%d,%d,%.4f,%.4f,%.4f,%.4f,%.1f,%.3f,%.4f,%.4f,%.3f,%.3f,%.3f,%.2f\n", t,
                 SegmentStatusName(st.status), DecisionStateName(d.state), d.reduced_sensitivity ? 1 : 0,
                 transient_, leak_like_, in_ / n, out_ / n, inv_ / n, res_ / n, st.linepack_kg,
                 st.mean_temperature_k, d.bias_kg_s, d.sigma_kg_s, d.phi, ratio, target, d.volatility_scale);
    n_ = transient_ = leak_like_ = 0;
    in_ = out_ = inv_ = res_ = 0.0;
  }

 private:
  std::FILE* f_ = nullptr;
  double next_s_ = -1e300;
  int n_ = 0, transient_ = 0, leak_like_ = 0;
  double in_ = 0.0, out_ = 0.0, inv_ = 0.0, res_ = 0.0;
};

int RunFamily(const EvaluateArgs& a, const Site& site, const sim::BatchSpec& batch, const std::string& out,
              std::string* criteria);

// Every instrument family of the batch (or the one --family names): one
// evaluation each, in DIR when the batch lists one family, else DIR/FAMILY.
int RunEvaluate(const EvaluateArgs& a) {
  Site site;
  std::vector<ConfigProblem> problems;
  if (!LoadSiteOrSay(a.config, &site)) return 2;
  sim::BatchSpec batch;
  if (!sim::LoadBatchFile(a.batch, site, &batch, &problems)) {
    for (const auto& p : problems) std::fprintf(stderr, "%s\n", p.ToString().c_str());
    std::fprintf(stderr, "%s: %zu problem%s (format: config/EVALUATE.md)\n", a.batch.c_str(), problems.size(),
                 problems.size() == 1 ? "" : "s");
    return 2;
  }
  std::vector<std::string> families = batch.families;
  if (!a.family.empty()) {
    if (std::find(families.begin(), families.end(), a.family) == families.end()) {
      std::fprintf(stderr, "--family %s: the batch lists only", a.family.c_str());
      for (const auto& f : families) std::fprintf(stderr, " %s", f.c_str());
      std::fprintf(stderr, "\n");
      return 2;
    }
    families = {a.family};
  }
  std::string criteria;
  for (const std::string& f : families) {
    sim::BatchSpec b = batch;
    b.family = f;
    const std::string out = batch.families.size() > 1 ? (std::filesystem::path(a.out) / f).string() : a.out;
    const int rc = RunFamily(a, site, b, out, &criteria);
    if (rc != 0) return rc;
  }
  if (batch.families.size() > 1 && a.family.empty()) {
    std::string why;
    if (!WriteFileAtomic((std::filesystem::path(a.out) / "criteria.md").string(), criteria, &why)) {
      std::fprintf(stderr, "%s\n", why.c_str());
      return 1;
    }
  }
  return 0;
}

int RunFamily(const EvaluateArgs& a, const Site& site, const sim::BatchSpec& batch, const std::string& out,
              std::string* criteria) {
  std::error_code ec;
  std::filesystem::create_directories(out, ec);
  if (ec) {
    std::fprintf(stderr, "--out %s: %s\n", out.c_str(), ec.message().c_str());
    return 1;
  }
  const size_t grid = sim::LeakRunCount(batch);
  if (!a.quiet)
    std::fprintf(stderr, "%s: segment %s, %s instruments; tuning %g days, leak-free %g days, %zu leak runs\n",
                 a.batch.c_str(), site.segments[static_cast<size_t>(batch.segment)].id.c_str(), batch.family.c_str(),
                 batch.tuning_days, batch.leak_free_days, grid);
  sim::EvaluateOptions options;
  options.jobs = a.jobs;
  std::unique_ptr<LeakFreeTrace> trace;
  if (!a.trace.empty()) {
    trace = std::make_unique<LeakFreeTrace>();
    if (!trace->Open(a.trace)) {
      std::fprintf(stderr, "--trace-leak-free %s: cannot write\n", a.trace.c_str());
      return 1;
    }
    options.on_leak_free_tick = [&trace](const Monitor& m, int seg, double t) { trace->Tick(m, seg, t); };
  }
  const bool tty = ::isatty(2) != 0;
  options.on_run = [&](int done, int total, const sim::RunOutcome& o) {
    if (a.quiet) return;
    if (!o.error.empty()) {
      std::fprintf(stderr, "%s%s run %d: %s\n", tty ? "\r\033[K" : "", sim::RunKindName(o.kind), o.index,
                   o.error.c_str());
      return;
    }
    if (o.kind != sim::RunKind::kLeak) {
      std::fprintf(stderr, "%s%s run: %.1f days, %llu readings, %d false alarm(s), %.1f s\n", tty ? "\r\033[K" : "",
                   sim::RunKindName(o.kind), o.duration_s / 86400.0, static_cast<unsigned long long>(o.readings),
                   o.false_alarms, o.wall_s);
    } else if (tty) {
      std::fprintf(stderr, "\r\033[K[%d/%d] leak runs", done, total);
    }
    if (tty && done == total) std::fprintf(stderr, "\n");
  };
  sim::EvaluationResult result;
  std::string why;
  if (!sim::RunEvaluation(site, batch, options, &result, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.batch.c_str(), why.c_str());
    return 2;
  }
  *criteria += result.CriteriaMarkdown();
  const std::string dir = out + (out.empty() || out.back() == '/' ? "" : "/");
  const std::string md = result.SummaryMarkdown();
  struct Out {
    std::string name, text;
  };
  const Out outs[] = {{"summary.md", md},
                      {"summary.csv", result.SummaryCsv()},
                      {"runs.csv", result.RunsCsv()},
                      {"evaluation.json", result.ToJson().dump(1) + "\n"}};
  for (const Out& o : outs) {
    if (!WriteFileAtomic(dir + o.name, o.text, &why)) {
      std::fprintf(stderr, "%s\n", why.c_str());
      return 1;
    }
  }
  std::printf("%s", md.c_str());
  std::printf("\nwrote %ssummary.md, summary.csv, runs.csv, evaluation.json\n", dir.c_str());
  if (a.no_report) return 0;
  std::string script = a.report_script, tried;
  if (script.empty() && !FindToolScript("evaluate-report.py", &script, &tried)) {
    std::fprintf(stderr, "report: evaluate-report.py not found (tried %s); the tables above are complete. "
                 "Give it with --report-script.\n", tried.c_str());
    return 1;
  }
  const int rc = RunPython(script, {out});
  if (rc != 0) {
    std::fprintf(stderr, "report: '%s %s' failed (status %d); the tables above are complete. "
                 "The report needs python3-matplotlib and python3-scipy.\n", script.c_str(), a.out.c_str(), rc);
    return 1;
  }
  std::printf("report: %sreport.html\n", dir.c_str());
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<EvaluateArgs>();
  CLI::App* cmd = app.add_subcommand(
      "evaluate", "Detection performance on simulated runs: leak grid, leak-free month, baseline and bound");
  cmd->add_option("--config", args->config, "Site config (JSON)")->required()->check(CLI::ExistingFile);
  cmd->add_option("--batch", args->batch, "Batch file (JSON, \"holdfast-batch/1\")")->required();
  cmd->add_option("--out", args->out, "Output directory (created if needed)")->required();
  cmd->add_option("--jobs", args->jobs, "Worker threads (default: one per core)")->check(CLI::Range(0, 256));
  cmd->add_flag("--no-report", args->no_report, "Tables only: skip the HTML report (no matplotlib needed)");
  cmd->add_option("--report-script", args->report_script, "The report script (default: installed beside holdfast, else the source tree's tools/)");
  cmd->add_flag("--quiet", args->quiet, "No progress on standard error");
  cmd->add_option("--family", args->family, "Run only this instrument family of the batch (standard, rough)");
  cmd->add_option("--trace-leak-free", args->trace,
                  "Write a per-minute CSV of the leak-free run (balance, decision state, detector ratio) to FILE");
  cmd->callback([args, exit_code] { *exit_code = RunEvaluate(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
