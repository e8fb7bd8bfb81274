// seatilt/error.hpp — error types carrying the process exit code.
//
// Owns: the exception hierarchy that library code throws for bad set-up and
// I/O, and the exit codes documented in README.md. Per-cell problems are
// never exceptions: they become fill plus a quality flag (see kernel.hpp).
//
// Exit codes (every command):
//   0 success
//   2 usage or job-file error          -> UsageError
//   3 an input is unreadable/invalid   -> InputError
//   4 output could not be written      -> OutputError
//   5 a batch finished with failures   (set by the batch loop, no type)
#pragma once

#include <stdexcept>
#include <string>

namespace seatilt {

/// Exit codes shared by every command (README.md, "Exit codes").
enum class ExitCode : int {
  ok = 0,
  usage = 2,
  input = 3,
  output = 4,
  batch = 5,
};

/// Base of every seatilt error; what() is one line naming file, variable and
/// problem.
class Error : public std::runtime_error {
public:
  Error(ExitCode code, const std::string& message)
      : std::runtime_error(message), code_(code) {}
  /// Returns the process exit code that this error maps to.
  [[nodiscard]] ExitCode code() const noexcept { return code_; }

private:
  ExitCode code_;
};

/// Bad command line, option value or job file (exit 2).
class UsageError : public Error {
public:
  explicit UsageError(const std::string& message) : Error(ExitCode::usage, message) {}
};

/// An input file is unreadable or cannot be processed (exit 3).
class InputError : public Error {
public:
  explicit InputError(const std::string& message) : Error(ExitCode::input, message) {}
};

/// An output could not be written, or exists without --force (exit 4).
class OutputError : public Error {
public:
  explicit OutputError(const std::string& message) : Error(ExitCode::output, message) {}
};

/// Builds "FILE: variable VAR: PROBLEM" (variable part omitted when empty),
/// the one-line form every input message uses.
std::string input_message(const std::string& file, const std::string& variable,
                          const std::string& problem);

}  // namespace seatilt
