// Reference probe: reads lines "h k mu [states]" from stdin and prints
// "arl_markov arl_siegmund" (%.12g) for each, the one-sided CUSUM average run
// lengths of holdfast/arl.h, so that a script can compare them with an
// independent method (tests/ref/arl_check.py). states defaults to 200.
// A line starting with '#' or empty is skipped.
#include <cstdio>
#include <iostream>
#include <sstream>
#include <string>

#include "holdfast/arl.h"

int main() {
  std::string line;
  int status = 0;
  while (std::getline(std::cin, line)) {
    if (line.empty() || line[0] == '#') continue;
    std::istringstream in(line);
    double h = 0.0, k = 0.0, mu = 0.0;
    int states = 200;
    if (!(in >> h >> k >> mu)) {
      std::fprintf(stderr, "arl_probe: cannot read '%s'\n", line.c_str());
      std::printf("nan nan error\n");
      status = 2;
      continue;
    }
    in >> states;
    std::printf("%.12g %.12g\n", holdfast::CusumArlMarkov(h, k, mu, states),
                holdfast::CusumArlSiegmund(h, k, mu));
  }
  return status;
}
