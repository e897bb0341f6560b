// Placeholder until the calibration module lands; replaced in the same series of commits.
#include <cstdio>
#include "daemon/subcommands.h"
namespace plumbline {
int RunCalibrate(const Args&) {
  std::fprintf(stderr, "plumbline calibrate: not available in this build yet\n");
  return 2;
}
}  // namespace plumbline
