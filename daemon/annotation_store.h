// The annotations created through the HTTP API (POST /v1/annotations), kept in
// the state directory so they outlive a restart. The file is a JSON list of
// annotation objects, in the keys of the config's `annotations:` entries, so
// the config loader reads it back with the same rules (ParseAnnotationsText);
// it is replaced atomically (FileSystem::ReplaceFile: temporary file, fsync,
// rename, fsync of the directory). Plain functions; the caller (Service)
// serialises writers.
#pragma once

#include <string>
#include <vector>

#include "daemon/file_system.h"
#include "detectors/annotation.h"
#include "detectors/status.h"

namespace plumbline {

// The file's name inside the state directory.
inline constexpr const char* kAnnotationFileName = "annotations.json";

// One JSON object with the config keys that apply to its kind (id, kind,
// match, note; at, within, direction for a planned change; from, to, learn for
// a maintenance window), plus "source": `source` unless it is empty (the API
// says "config" or "api"; the file leaves it out). No newline.
std::string AnnotationToJson(const Annotation& annotation, std::string_view source = {});

// The annotations in `path`; none when the file does not exist. Corruption
// (naming the file and each problem) when it does not read back.
StatusOr<std::vector<Annotation>> LoadAnnotationFile(FileSystem* file_system,
                                                     const std::string& path);

// Replaces `path` atomically with `annotations` as a JSON list.
Status SaveAnnotationFile(FileSystem* file_system, const std::string& path,
                          const std::vector<Annotation>& annotations);

}  // namespace plumbline
