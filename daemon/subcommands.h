// The subcommands of the `plumbline` executable. Each takes the words after its
// name and returns the process exit code: 0 success, 1 the job found a problem
// (for example an invalid config), 2 a usage error.
#pragma once

#include <string>
#include <vector>

namespace plumbline {

using Args = std::vector<std::string>;

int RunCalibrate(const Args& args);
int RunCheck(const Args& args);
int RunForecast(const Args& args);
int RunReplay(const Args& args);
int RunServe(const Args& args);

}  // namespace plumbline
