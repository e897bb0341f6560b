// The operator pages: the status page `serve` answers at `/`, and the HTML
// report `replay --report` writes. Both are single self-contained files (style,
// script and data inline; no fonts, images or other requests beyond the
// daemon's own JSON API), built from daemon/ui/ (status.html, report.html,
// chart.js, style.css), which CMake embeds at configure time
// (daemon/ui/embed.cmake). Pure functions; thread-safe.
#pragma once

#include <string>
#include <string_view>

namespace plumbline {

// The status page (built once, then shared).
const std::string& StatusPageHtml();

// The replay report around `data_json`, one JSON object as
// daemon/ui/report.html reads it (replay_command.cc writes it). Any "</" in
// the JSON is written as "<\/" so that it cannot close the script element.
std::string ReportPageHtml(std::string_view data_json);

}  // namespace plumbline
