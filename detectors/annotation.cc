#include "detectors/annotation.h"

namespace plumbline {

std::string_view ToString(AnnotationKind kind) {
  switch (kind) {
    case AnnotationKind::kPlannedChange:
      return "planned-change";
    case AnnotationKind::kMaintenance:
      return "maintenance";
  }
  return "planned-change";
}

bool AnnotationKindFromString(std::string_view text, AnnotationKind* kind) {
  if (text == "planned-change") {
    *kind = AnnotationKind::kPlannedChange;
    return true;
  }
  if (text == "maintenance") {
    *kind = AnnotationKind::kMaintenance;
    return true;
  }
  return false;
}

bool Annotation::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why) *why = message;
    return false;
  };
  if (id.empty()) return fail("id must not be empty");
  if (kind == AnnotationKind::kPlannedChange) {
    if (within <= 0) return fail("within must be a positive duration");
  } else if (!(from < to)) {
    return fail("to must come after from");
  }
  return true;
}

}  // namespace plumbline
