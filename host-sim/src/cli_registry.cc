#include "cli_commands.h"

namespace holdfast::cli {
std::vector<RegisterFn>& Registry() {
  static std::vector<RegisterFn> registry;
  return registry;
}
}  // namespace holdfast::cli
