#include "site_file.h"

#include <cstddef>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "json_file.h"

namespace holdfast {

bool LoadSiteFile(const std::string& path, holdfast::Site* site,
                  std::vector<holdfast::ConfigProblem>* problems) {
  std::vector<ConfigProblem> local;
  std::vector<ConfigProblem>* out = problems != nullptr ? problems : &local;
  nlohmann::json doc;
  bool parsed = false;
  const bool unique_keys = ReadJsonFile(path, &doc, out, &parsed);
  if (!parsed) return false;
  const std::size_t first = out->size();
  const bool compiled = CompileSite(doc, site, out);
  for (std::size_t i = first; i < out->size(); ++i) {
    ConfigProblem& p = (*out)[i];
    p.path = p.path.empty() ? path : path + ":" + p.path;
  }
  return compiled && unique_keys;
}

}  // namespace holdfast
