#include "site_file.h"

#include <cerrno>
#include <cstddef>
#include <cstdio>
#include <cstring>
#include <exception>
#include <functional>
#include <set>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

namespace holdfast {
namespace {

using nlohmann::json;

bool ReadWholeFile(const std::string& path, std::string* text, std::string* why) {
  std::FILE* f = std::fopen(path.c_str(), "rb");
  if (f == nullptr) {
    *why = std::strerror(errno);
    return false;
  }
  char buf[65536];
  std::size_t n = 0;
  while ((n = std::fread(buf, 1, sizeof buf, f)) > 0) text->append(buf, n);
  const bool failed = std::ferror(f) != 0;
  const int err = errno;
  std::fclose(f);
  if (failed) {
    *why = std::strerror(err);
    return false;
  }
  return true;
}

std::string Token(const std::string& key) {
  std::string out;
  for (char c : key) {
    if (c == '~') {
      out += "~0";
    } else if (c == '/') {
      out += "~1";
    } else {
      out += c;
    }
  }
  return out;
}

// Tracks where the parser is, to report duplicate keys in an object with the
// JSON pointer of the repeated member.
class DuplicateKeyFinder {
 public:
  bool operator()(int /*depth*/, json::parse_event_t event, json& parsed) {
    switch (event) {
      case json::parse_event_t::object_start:
        frames_.push_back(Frame{false, 0, {}, {}});
        break;
      case json::parse_event_t::array_start:
        frames_.push_back(Frame{true, 0, {}, {}});
        break;
      case json::parse_event_t::key:
        if (!frames_.empty() && parsed.is_string()) {
          Frame& top = frames_.back();
          top.key = parsed.get<std::string>();
          if (!top.keys.insert(top.key).second) {
            duplicates.push_back(ConfigProblem{
                Pointer(), "duplicate key \"" + top.key +
                               "\" in one object; JSON keeps only the last, so ids and fields "
                               "must be unique"});
          }
        }
        break;
      case json::parse_event_t::value:
        ElementDone();
        break;
      case json::parse_event_t::object_end:
      case json::parse_event_t::array_end:
        if (!frames_.empty()) frames_.pop_back();
        ElementDone();
        break;
    }
    return true;
  }

  std::vector<ConfigProblem> duplicates;

 private:
  struct Frame {
    bool is_array;
    std::size_t index;
    std::string key;
    std::set<std::string> keys;
  };

  void ElementDone() {
    if (!frames_.empty() && frames_.back().is_array) ++frames_.back().index;
  }

  std::string Pointer() const {
    std::string out;
    for (const Frame& f : frames_) {
      out += "/";
      out += f.is_array ? std::to_string(f.index) : Token(f.key);
    }
    return out;
  }

  std::vector<Frame> frames_;
};

// "file:line:column" and the parser's reason, from a parse error.
ConfigProblem ParseProblem(const std::string& file, const std::string& text,
                           const json::parse_error& e) {
  std::string what = e.what();
  // nlohmann: "[json.exception.parse_error.101] parse error at line L, column C: reason"
  unsigned long line = 0;
  unsigned long column = 0;
  const std::size_t at = what.find("at line ");
  if (at == std::string::npos ||
      std::sscanf(what.c_str() + at, "at line %lu, column %lu", &line, &column) != 2) {
    // Count from the byte offset of the last character read (1-based).
    line = 1;
    column = 0;
    const std::size_t end = e.byte < text.size() ? e.byte : text.size();
    for (std::size_t i = 0; i < end; ++i) {
      if (text[i] == '\n') {
        ++line;
        column = 0;
      } else {
        ++column;
      }
    }
  }
  std::string reason = what;
  const std::size_t colon = what.find(": ", at == std::string::npos ? 0 : at);
  if (colon != std::string::npos) reason = what.substr(colon + 2);
  return ConfigProblem{file + ":" + std::to_string(line) + ":" + std::to_string(column),
                       "parse error: " + reason};
}

}  // namespace

bool LoadSiteFile(const std::string& path, holdfast::Site* site,
                  std::vector<holdfast::ConfigProblem>* problems) {
  std::vector<ConfigProblem> local;
  std::vector<ConfigProblem>* out = problems != nullptr ? problems : &local;
  std::string text;
  std::string why;
  if (!ReadWholeFile(path, &text, &why)) {
    out->push_back(ConfigProblem{path, "cannot read the file: " + why});
    return false;
  }
  json doc;
  DuplicateKeyFinder finder;
  try {
    doc = json::parse(text, std::ref(finder));
  } catch (const json::parse_error& e) {
    out->push_back(ParseProblem(path, text, e));
    return false;
  } catch (const std::exception& e) {
    out->push_back(ConfigProblem{path, std::string("cannot parse the file: ") + e.what()});
    return false;
  }
  const std::size_t first = out->size();
  const bool unique_keys = finder.duplicates.empty();
  for (ConfigProblem& p : finder.duplicates) out->push_back(std::move(p));
  const bool compiled = CompileSite(doc, site, out);
  const bool ok = compiled && unique_keys;
  for (std::size_t i = first; i < out->size(); ++i) {
    ConfigProblem& p = (*out)[i];
    p.path = p.path.empty() ? path : path + ":" + p.path;
  }
  return ok;
}

}  // namespace holdfast
