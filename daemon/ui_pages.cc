#include "daemon/ui_pages.h"

namespace plumbline {
namespace {

#include "ui_assets.inc"

// Replaces the first `marker` in *page with `text` (each marker appears once).
void Fill(std::string* page, std::string_view marker, std::string_view text) {
  const std::size_t at = page->find(marker);
  if (at != std::string::npos) page->replace(at, marker.size(), text);
}

std::string WithStyleAndChart(std::string_view page) {
  std::string out(page);
  Fill(&out, "/*@STYLE@*/", kStyleCss);
  Fill(&out, "/*@CHART@*/", kChartJs);
  return out;
}

}  // namespace

const std::string& StatusPageHtml() {
  static const std::string page = WithStyleAndChart(kStatusHtml);
  return page;
}

std::string ReportPageHtml(std::string_view data_json) {
  std::string data;
  data.reserve(data_json.size());
  for (std::size_t i = 0; i < data_json.size(); ++i) {
    data.push_back(data_json[i]);
    if (data_json[i] == '<' && i + 1 < data_json.size() && data_json[i + 1] == '/') {
      data.push_back('\\');
    }
  }
  // The data goes in last: nothing in it is taken for a marker.
  std::string page = WithStyleAndChart(kReportHtml);
  Fill(&page, "/*@DATA@*/", data);
  return page;
}

}  // namespace plumbline
