// status.h: errors as values for the statistics engine.
//
// core/ never throws on its hot paths. A fallible call returns
// `expected<T>`: either a value or an `error` with a human-readable message.
// Callers check `ok()` before touching `value()`. Thread-safety: plain value
// types, safe to copy between threads.
#pragma once

#include <string>
#include <utility>
#include <variant>

namespace plumbline {

// What went wrong, in words a user can act on ("reference sample has 1 value;
// at least 2 are needed").
struct error {
  std::string message;
};

// A minimal stand-in for C++23 std::expected<T, error>.
template <typename T>
class expected {
 public:
  expected(T value) : v_(std::move(value)) {}         // NOLINT: implicit by design
  expected(error e) : v_(std::move(e)) {}             // NOLINT: implicit by design

  bool ok() const { return std::holds_alternative<T>(v_); }
  explicit operator bool() const { return ok(); }

  // REQUIRES: ok().
  T& value() { return std::get<T>(v_); }
  const T& value() const { return std::get<T>(v_); }
  T* operator->() { return &value(); }
  const T* operator->() const { return &value(); }

  // REQUIRES: !ok().
  const error& err() const { return std::get<error>(v_); }

 private:
  std::variant<T, error> v_;
};

inline error make_error(std::string message) { return error{std::move(message)}; }

}  // namespace plumbline
