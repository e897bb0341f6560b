# Embeds the page files under daemon/ui/ as C++ raw string literals in
# <build>/generated/ui_assets.inc (one constant per file), at configure time;
# editing a page file re-runs the configure step.
set(ui_dir ${CMAKE_CURRENT_LIST_DIR})
set(ui_files status.html report.html chart.js style.css)
set(ui_constants kStatusHtml kReportHtml kChartJs kStyleCss)
set(ui_text "// Generated from daemon/ui/ by daemon/ui/embed.cmake: do not edit.\n")
foreach(file constant IN ZIP_LISTS ui_files ui_constants)
  file(READ ${ui_dir}/${file} content)
  string(FIND "${content}" ")plumbline_ui\"" clash)
  if(NOT clash EQUAL -1)
    message(FATAL_ERROR "daemon/ui/${file} contains the raw-string delimiter")
  endif()
  string(APPEND ui_text
         "constexpr std::string_view ${constant} = R\"plumbline_ui(${content})plumbline_ui\";\n")
  set_property(DIRECTORY ${PROJECT_SOURCE_DIR}/daemon APPEND PROPERTY CMAKE_CONFIGURE_DEPENDS
               ${ui_dir}/${file})
endforeach()
file(WRITE ${CMAKE_BINARY_DIR}/generated/ui_assets.inc.new "${ui_text}")
file(COPY_FILE ${CMAKE_BINARY_DIR}/generated/ui_assets.inc.new
     ${CMAKE_BINARY_DIR}/generated/ui_assets.inc ONLY_IF_DIFFERENT)
