// Command-line front end: shared helpers of the subcommands. No numerics here.
#pragma once

#include <CLI/CLI.hpp>

#include <string>
#include <vector>

#include "seatilt/kernel.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/tiling.hpp"

namespace seatilt::cli {

/// Whether informational lines go to stderr (a terminal, or --verbose).
bool chatty();
void set_verbose(bool on);

/// Command-line values of the shared currents options; each throws UsageError
/// "--OPTION: 'TEXT' is not one of ..." for anything else. GRAVITY takes
/// "standard", "wgs84" or a number in m s-2 (GravityModel::constant).
EquatorMethod equator_option(const std::string& text);
CoastMethod coast_option(const std::string& text);
EarthModel earth_option(const std::string& text);
void gravity_option(const std::string& text, GravityModel& model, double& value);

/// Prints "seatilt: error: MESSAGE" as one line on stderr.
void print_error(const std::string& message);

/// Prints an informational line when chatty().
void info(const std::string& message);

/// The whole command line, shell-quoted where needed (for history).
const std::string& command_line();
void set_command_line(int argc, char** argv);

/// A subcommand: ADD registers its options on the main app and returns the
/// subcommand; RUN executes it after parsing and returns the exit code (or
/// throws seatilt::Error). Each src/cli/<command>.cpp registers itself with a
/// namespace-scope `const bool registered = register_command(...)`, so adding
/// a command touches no shared file but CMakeLists.txt.
struct Command {
  const char* name;
  CLI::App* (*add)(CLI::App& app);
  int (*run)();
};

/// Adds COMMAND to the registry; returns true (for static registration).
bool register_command(const Command& command);

/// Every registered command, sorted by name.
const std::vector<Command>& commands();

}  // namespace seatilt::cli
