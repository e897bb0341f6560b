#include "daemon/annotation_store.h"

#include "config/config.h"
#include "daemon/text.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

void AppendField(std::string_view key, std::string_view value, std::string* out) {
  *out += ',';
  AppendJsonString(key, out);
  *out += ':';
  AppendJsonString(value, out);
}

}  // namespace

std::string AnnotationToJson(const Annotation& a, std::string_view source) {
  std::string out = "{\"id\":";
  AppendJsonString(a.id, &out);
  AppendField("kind", ToString(a.kind), &out);
  AppendField("match", a.match, &out);
  if (a.kind == AnnotationKind::kPlannedChange) {
    AppendField("at", FormatRfc3339(a.at), &out);
    AppendField("within", FormatDuration(a.within), &out);
    AppendField("direction",
                a.direction == Direction::kNone ? "any" : ToString(a.direction), &out);
  } else {
    AppendField("from", FormatRfc3339(a.from), &out);
    AppendField("to", FormatRfc3339(a.to), &out);
    out += a.learn ? ",\"learn\":true" : ",\"learn\":false";
  }
  if (!a.note.empty()) AppendField("note", a.note, &out);
  if (!source.empty()) AppendField("source", source, &out);
  out += '}';
  return out;
}

StatusOr<std::vector<Annotation>> LoadAnnotationFile(FileSystem* file_system,
                                                     const std::string& path) {
  StatusOr<std::string> text = file_system->ReadFile(path);
  if (!text.ok()) {
    if (text.status().code() == Status::Code::kNotFound) return std::vector<Annotation>();
    return text.status();
  }
  std::vector<Annotation> out;
  std::vector<ConfigError> errors = ParseAnnotationsText(*text, path, 1, &out);
  if (!errors.empty()) {
    std::string message = "annotation file does not read back:";
    for (const ConfigError& e : errors) message += "\n" + e.ToString();
    return Status::Corruption(message);
  }
  return out;
}

Status SaveAnnotationFile(FileSystem* file_system, const std::string& path,
                          const std::vector<Annotation>& annotations) {
  std::string text = "[";
  for (std::size_t i = 0; i < annotations.size(); ++i) {
    text += i ? ",\n " : "\n ";
    text += AnnotationToJson(annotations[i]);
  }
  text += "\n]\n";
  return file_system->ReplaceFile(path, text);
}

}  // namespace plumbline
