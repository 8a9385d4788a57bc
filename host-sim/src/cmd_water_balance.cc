// `holdfast water-balance --input YEAR.json [--out DIR]`: the IWA standard
// water balance, UARL and ILI with 95 % confidence limits, as a Markdown
// table on standard output and, with --out, as DIR/water-balance.{md,csv,html}.
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <memory>
#include <string>
#include <vector>

#include "cli_commands.h"
#include "holdfast/water.h"
#include "water_files.h"

namespace holdfast::cli {
namespace {

constexpr const char* kCaution =
    "Holdfast is a supplementary aid. It does not replace the utility's own procedures, regulation, "
    "or licensed engineering judgement.";

struct Args {
  std::string input, out;
};

std::string F(double v, int dec) {
  if (!std::isfinite(v)) return "n/a";
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", dec, v);
  return buf;
}

struct Row {
  std::string name;
  const water::BalanceComponent* c;
  int level;  // 0 = main heading, 1 = sub-component
};

std::vector<Row> Rows(const water::WaterBalance& b) {
  return {{"System input volume", &b.system_input, 0},
          {"Authorised consumption", &b.authorised, 0},
          {"Billed authorised consumption (revenue water)", &b.billed_authorised, 1},
          {"Billed metered consumption", &b.billed_metered, 2},
          {"Billed unmetered consumption", &b.billed_unmetered, 2},
          {"Unbilled authorised consumption", &b.unbilled_authorised, 1},
          {"Unbilled metered consumption", &b.unbilled_metered, 2},
          {"Unbilled unmetered consumption", &b.unbilled_unmetered, 2},
          {"Water losses", &b.water_losses, 0},
          {"Apparent losses", &b.apparent_losses, 1},
          {"Unauthorised consumption", &b.unauthorised, 2},
          {"Customer meter inaccuracies and data errors", &b.meter_inaccuracies, 2},
          {"Real losses", &b.real_losses, 1},
          {"Non-revenue water", &b.non_revenue_water, 0}};
}

std::string Markdown(const std::string& name, const water::WaterBalance& b) {
  std::string s = "# IWA water balance: " + name + " (" + F(b.period_days, 0) + " days)\n\n";
  s += "| component | volume m3 | 95 % limits m3 | % of system input |\n|---|---:|---:|---:|\n";
  const double siv = b.system_input.m3();
  for (const Row& r : Rows(b)) {
    const std::string indent = r.level == 0 ? "**" : (r.level == 1 ? "&nbsp;&nbsp;" : "&nbsp;&nbsp;&nbsp;&nbsp;");
    const std::string close = r.level == 0 ? "**" : "";
    s += "| " + indent + r.name + close + " | " + F(r.c->m3(), 1) + " | +- " + F(r.c->ci95_m3, 1) + " | " +
         (siv > 0 ? F(100.0 * r.c->m3() / siv, 1) : "n/a") + " |\n";
  }
  s += "\n| indicator | value | 95 % limits |\n|---|---:|---:|\n";
  s += "| CARL, L/day | " + F(b.carl_l_per_day.value, 0) + " | +- " + F(b.carl_l_per_day.ci95, 0) + " |\n";
  s += "| Real losses, L/connection/day | " + F(b.real_losses_l_per_connection_day.value, 1) + " | +- " +
       F(b.real_losses_l_per_connection_day.ci95, 1) + " |\n";
  s += "| UARL (Lambert et al. 1999), L/day | " + F(b.uarl.litres_per_day.value, 0) + " | +- " +
       F(b.uarl.litres_per_day.ci95, 0) + " |\n";
  s += "| ILI = CARL / UARL | " + F(b.ili.value, 2) + " | +- " + F(b.ili.ci95, 2) + " |\n";
  s += "| Non-revenue water, % of system input | " + F(b.nrw_pct_of_input, 1) + " | |\n";
  if (!b.uarl.applicability_note.empty()) s += "\nNote: UARL " + b.uarl.applicability_note + ".\n";
  for (const std::string& w : b.warnings) s += "\nWarning: " + w + ".\n";
  s += "\nLimits: 95 % confidence, from the stated accuracies of the inputs, variances summed (independent inputs).\n";
  s += "\n> " + std::string(kCaution) + "\n";
  return s;
}

std::string Csv(const water::WaterBalance& b) {
  std::string s = "component,volume_m3,ci95_m3\n";
  for (const Row& r : Rows(b)) s += r.name + "," + F(r.c->m3(), 3) + "," + F(r.c->ci95_m3, 3) + "\n";
  s += "CARL L/day," + F(b.carl_l_per_day.value, 1) + "," + F(b.carl_l_per_day.ci95, 1) + "\n";
  s += "UARL L/day," + F(b.uarl.litres_per_day.value, 1) + "," + F(b.uarl.litres_per_day.ci95, 1) + "\n";
  s += "ILI," + F(b.ili.value, 4) + "," + F(b.ili.ci95, 4) + "\n";
  s += "NRW % of system input," + F(b.nrw_pct_of_input, 3) + ",\n";
  return s;
}

std::string Escape(const std::string& t) {
  std::string o;
  for (char c : t) {
    if (c == '<') o += "&lt;";
    else if (c == '>') o += "&gt;";
    else if (c == '&') o += "&amp;";
    else if (c == '"') o += "&quot;";
    else o += c;
  }
  return o;
}

std::string Html(const std::string& name, const water::WaterBalance& b) {
  const double siv = std::max(b.system_input.m3(), 1e-9);
  auto cell = [&](const char* title, const water::BalanceComponent& c, const char* colour) {
    const double h = std::max(4.0, 360.0 * std::max(0.0, c.m3()) / siv);
    return std::string("<div class=cell style=\"height:") + F(h, 0) + "px;background:" + colour + "\"><b>" + title +
           "</b><br>" + F(c.m3(), 0) + " m3<br><small>+- " + F(c.ci95_m3, 0) + "</small></div>";
  };
  std::string s = "<!doctype html><html><head><meta charset=utf-8><title>IWA water balance: " + Escape(name) +
                  "</title><style>body{font-family:sans-serif;max-width:1100px;margin:2em auto}"
                  "table{border-collapse:collapse}td,th{border:1px solid #aaa;padding:3px 8px;text-align:right}"
                  "td:first-child{text-align:left}.col{display:inline-block;vertical-align:top;width:200px;margin-right:4px}"
                  ".cell{border:1px solid #555;padding:3px;font-size:12px;overflow:hidden;box-sizing:border-box}"
                  ".caution{border:2px solid #b60;padding:8px;background:#fff6e6}</style></head><body>";
  s += "<h1>IWA water balance: " + Escape(name) + "</h1><p>Period: " + F(b.period_days, 0) +
       " days. Limits are 95 % confidence, propagated from the stated accuracy of each input (variances summed, "
       "inputs independent).</p>";
  s += "<p class=caution><b>Caution.</b> " + std::string(kCaution) + "</p>";
  s += "<h2>Balance</h2><div>";
  s += "<div class=col>" + cell("System input volume", b.system_input, "#cfe2f3") + "</div>";
  s += "<div class=col>" + cell("Authorised consumption", b.authorised, "#d9ead3") +
       cell("Water losses", b.water_losses, "#f4cccc") + "</div>";
  s += "<div class=col>" + cell("Billed authorised", b.billed_authorised, "#b6d7a8") +
       cell("Unbilled authorised", b.unbilled_authorised, "#fff2cc") + cell("Apparent losses", b.apparent_losses, "#f9cb9c") +
       cell("Real losses", b.real_losses, "#ea9999") + "</div>";
  s += "<div class=col>" + cell("Revenue water", b.billed_authorised, "#b6d7a8") +
       cell("Non-revenue water", b.non_revenue_water, "#e6b8af") + "</div></div>";
  s += "<h2>Components</h2><table><tr><th>component</th><th>volume m3</th><th>95 % limits m3</th><th>% of input</th></tr>";
  for (const Row& r : Rows(b)) {
    s += "<tr><td style=\"padding-left:" + std::to_string(8 + 18 * r.level) + "px\">" +
         (r.level == 0 ? "<b>" + Escape(r.name) + "</b>" : Escape(r.name)) + "</td><td>" + F(r.c->m3(), 1) +
         "</td><td>+- " + F(r.c->ci95_m3, 1) + "</td><td>" + F(100.0 * r.c->m3() / siv, 1) + "</td></tr>";
  }
  s += "</table><h2>Performance indicators</h2><table><tr><th>indicator</th><th>value</th><th>95 % limits</th></tr>";
  s += "<tr><td>CARL, L/day</td><td>" + F(b.carl_l_per_day.value, 0) + "</td><td>+- " + F(b.carl_l_per_day.ci95, 0) + "</td></tr>";
  s += "<tr><td>Real losses, L/connection/day</td><td>" + F(b.real_losses_l_per_connection_day.value, 1) + "</td><td>+- " +
       F(b.real_losses_l_per_connection_day.ci95, 1) + "</td></tr>";
  s += "<tr><td>UARL (Lambert et al. 1999), L/day</td><td>" + F(b.uarl.litres_per_day.value, 0) + "</td><td>+- " +
       F(b.uarl.litres_per_day.ci95, 0) + "</td></tr>";
  s += "<tr><td>ILI = CARL / UARL</td><td>" + F(b.ili.value, 2) + "</td><td>+- " + F(b.ili.ci95, 2) + "</td></tr>";
  s += "<tr><td>Non-revenue water, % of system input</td><td>" + F(b.nrw_pct_of_input, 1) + "</td><td></td></tr></table>";
  if (!b.uarl.applicability_note.empty()) s += "<p>Note: UARL " + Escape(b.uarl.applicability_note) + ".</p>";
  for (const std::string& w : b.warnings) s += "<p><b>Warning:</b> " + Escape(w) + ".</p>";
  s += "<p><small>UARL = (18 Lm + 0.8 Nc + 25 Lp) P litres/day (Lambert et al. 1999). Balance structure after the "
       "IWA standard water balance (Alegre et al. 2000).</small></p></body></html>\n";
  return s;
}

bool WriteText(const std::string& path, const std::string& text) {
  std::FILE* f = std::fopen(path.c_str(), "wb");
  if (f == nullptr) return false;
  const bool ok = std::fwrite(text.data(), 1, text.size(), f) == text.size();
  return std::fclose(f) == 0 && ok;
}

int Run(const Args& a) {
  water::WaterBalanceInputs in;
  std::string name;
  std::vector<ConfigProblem> problems;
  if (!LoadWaterYearFile(a.input, &in, &name, &problems)) {
    for (const auto& p : problems) std::fprintf(stderr, "%s\n", p.ToString().c_str());
    std::fprintf(stderr, "%s: %zu problem%s (format: config/WATER.md)\n", a.input.c_str(), problems.size(),
                 problems.size() == 1 ? "" : "s");
    return 2;
  }
  water::WaterBalance b;
  std::string why;
  if (!water::ComputeWaterBalance(in, &b, &why)) {
    std::fprintf(stderr, "%s: %s\n", a.input.c_str(), why.c_str());
    return 2;
  }
  const std::string md = Markdown(name, b);
  std::fputs(md.c_str(), stdout);
  std::fflush(stdout);
  if (!a.out.empty()) {
    std::error_code ec;
    std::filesystem::create_directories(a.out, ec);
    const std::filesystem::path dir(a.out);
    if (ec || !WriteText((dir / "water-balance.md").string(), md) || !WriteText((dir / "water-balance.csv").string(), Csv(b)) ||
        !WriteText((dir / "water-balance.html").string(), Html(name, b))) {
      std::fprintf(stderr, "--out: cannot write to %s\n", a.out.c_str());
      return 1;
    }
    std::fprintf(stderr, "wrote %s/water-balance.{md,csv,html}\n", a.out.c_str());
  }
  return 0;
}

void Register(CLI::App& app, int* exit_code) {
  auto args = std::make_shared<Args>();
  CLI::App* cmd = app.add_subcommand(
      "water-balance", "IWA standard water balance, UARL and ILI with 95 % limits from a year's figures");
  cmd->add_option("--input", args->input, "Year file (JSON, \"holdfast-water-year/1\")")->required();
  cmd->add_option("--out", args->out, "Also write DIR/water-balance.{md,csv,html}");
  cmd->callback([args, exit_code] { *exit_code = Run(*args); });
}

}  // namespace
HOLDFAST_REGISTER_COMMAND(Register);
}  // namespace holdfast::cli
