#include "detectors/status.h"

namespace plumbline {

std::string_view CodeName(Status::Code code) {
  switch (code) {
    case Status::Code::kOk: return "ok";
    case Status::Code::kInvalidArgument: return "invalid argument";
    case Status::Code::kOutOfRange: return "out of range";
    case Status::Code::kNotFound: return "not found";
    case Status::Code::kFailedPrecondition: return "failed precondition";
    case Status::Code::kIoError: return "i/o error";
    case Status::Code::kCorruption: return "corruption";
    case Status::Code::kUnavailable: return "unavailable";
  }
  return "unknown";
}

const std::string& Status::message() const {
  static const std::string kEmpty;
  return rep_ ? rep_->message : kEmpty;
}

std::string Status::ToString() const {
  if (ok()) return "ok";
  std::string out(CodeName(rep_->code));
  out += ": ";
  out += rep_->message;
  return out;
}

}  // namespace plumbline
