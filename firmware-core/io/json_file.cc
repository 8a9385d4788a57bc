// See json_file.h.
#include "json_file.h"

#include <cerrno>
#include <cstdio>
#include <cstring>
#include <utility>

#include "holdfast/json_check.h"

namespace holdfast {

bool ReadTextFile(const std::string& path, std::string* text, std::vector<ConfigProblem>* problems) {
  std::FILE* f = std::fopen(path.c_str(), "rb");
  if (f == nullptr) {
    problems->push_back(ConfigProblem{path, std::string("cannot read the file: ") + std::strerror(errno)});
    return false;
  }
  char buf[65536];
  std::size_t n = 0;
  while ((n = std::fread(buf, 1, sizeof buf, f)) > 0) text->append(buf, n);
  const bool failed = std::ferror(f) != 0;
  const int err = errno;
  std::fclose(f);
  if (failed) {
    problems->push_back(ConfigProblem{path, std::string("cannot read the file: ") + std::strerror(err)});
    return false;
  }
  return true;
}

bool ReadJsonFile(const std::string& path, nlohmann::json* doc, std::vector<ConfigProblem>* problems,
                  bool* parsed) {
  if (parsed != nullptr) *parsed = false;
  std::string text;
  if (!ReadTextFile(path, &text, problems)) return false;
  const std::size_t first = problems->size();
  // ParseJsonText fills the document only when the text parsed; then every
  // problem it reported is a repeated key at a JSON pointer: name the file.
  nlohmann::json d(nlohmann::json::value_t::discarded);
  const bool ok = ParseJsonText(text, path, &d, problems);
  const bool filled = !d.is_discarded();
  if (filled) {
    for (std::size_t i = first; i < problems->size(); ++i) (*problems)[i].path = path + ":" + (*problems)[i].path;
    *doc = std::move(d);
  }
  if (parsed != nullptr) *parsed = filled;
  return ok;
}

}  // namespace holdfast
