// Status and StatusOr: the error values of Plumbline's core.
//
// The core never throws. A fallible call returns a Status (success or a code
// with a one-line message) or a StatusOr<T> (a value or the reason there is none).
// Both are plain values: copyable, thread-compatible, no hidden state.
#pragma once

#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <utility>

namespace plumbline {

class Status {
 public:
  enum class Code {
    kOk,
    kInvalidArgument,     // the caller passed something the contract refuses
    kOutOfRange,          // a value outside its documented range
    kNotFound,            // a named thing does not exist
    kFailedPrecondition,  // the object is not in a state that allows the call
    kIoError,             // the operating system refused or failed
    kCorruption,          // stored data failed a check
    kUnavailable,         // try again later (overload, shutdown)
  };

  Status() = default;  // success

  static Status Ok() { return Status(); }
  static Status InvalidArgument(std::string message) {
    return Status(Code::kInvalidArgument, std::move(message));
  }
  static Status OutOfRange(std::string message) {
    return Status(Code::kOutOfRange, std::move(message));
  }
  static Status NotFound(std::string message) {
    return Status(Code::kNotFound, std::move(message));
  }
  static Status FailedPrecondition(std::string message) {
    return Status(Code::kFailedPrecondition, std::move(message));
  }
  static Status IoError(std::string message) {
    return Status(Code::kIoError, std::move(message));
  }
  static Status Corruption(std::string message) {
    return Status(Code::kCorruption, std::move(message));
  }
  static Status Unavailable(std::string message) {
    return Status(Code::kUnavailable, std::move(message));
  }

  bool ok() const { return rep_ == nullptr; }
  Code code() const { return rep_ ? rep_->code : Code::kOk; }
  const std::string& message() const;
  // "ok", or "<code name>: <message>".
  std::string ToString() const;

 private:
  struct Rep {
    Code code;
    std::string message;
  };
  Status(Code code, std::string message)
      : rep_(std::make_shared<const Rep>(Rep{code, std::move(message)})) {}

  // Null when ok, so a successful Status is one pointer and costs nothing to
  // make; errors share their immutable text when copied.
  std::shared_ptr<const Rep> rep_;
};

std::string_view CodeName(Status::Code code);

// A value or the Status that explains its absence. Constructing from an ok
// Status is a programming error and yields a kFailedPrecondition status.
template <typename T>
class StatusOr {
 public:
  StatusOr(T value) : value_(std::move(value)) {}  // NOLINT: implicit by design
  StatusOr(Status status) : status_(std::move(status)) {  // NOLINT: implicit by design
    if (status_.ok()) status_ = Status::FailedPrecondition("StatusOr built from ok status");
  }

  bool ok() const { return value_.has_value(); }
  const Status& status() const { return status_; }
  // Precondition: ok().
  const T& value() const& { return *value_; }
  T& value() & { return *value_; }
  T&& value() && { return std::move(*value_); }
  const T& operator*() const& { return *value_; }
  T& operator*() & { return *value_; }
  const T* operator->() const { return &*value_; }
  T* operator->() { return &*value_; }

 private:
  Status status_;
  std::optional<T> value_;
};

}  // namespace plumbline
