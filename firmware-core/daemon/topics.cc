#include "topics.h"

namespace holdfast::daemon {

bool IsTopicLevel(std::string_view level) {
  if (level.empty() || level.size() > 128) return false;
  for (const char c : level) {
    const auto u = static_cast<unsigned char>(c);
    if (c == '/' || c == '+' || c == '#' || u < 0x20 || u == 0x7f) return false;
  }
  return true;
}

TopicMatch TopicTree::Classify(std::string_view topic) const {
  TopicMatch m;
  if (topic.size() <= prefix_.size() || topic.compare(0, prefix_.size(), prefix_) != 0 ||
      topic[prefix_.size()] != '/')
    return m;
  const std::string_view rest = topic.substr(prefix_.size() + 1);
  auto under = [&](std::string_view head, TopicKind kind) {
    if (rest.size() > head.size() && rest.compare(0, head.size(), head) == 0 && rest[head.size()] == '/') {
      const std::string_view arg = rest.substr(head.size() + 1);
      if (IsTopicLevel(arg)) {
        m.kind = kind;
        m.arg = arg;
      }
      return true;
    }
    return false;
  };
  if (rest == "readings") {
    m.kind = TopicKind::kBatchReadings;
    return m;
  }
  if (under("readings", TopicKind::kPointReadings)) return m;
  if (under("commands", TopicKind::kCommand)) return m;
  return m;
}

}  // namespace holdfast::daemon
