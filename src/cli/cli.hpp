// Command-line front end: shared helpers of the subcommands. No numerics here.
#pragma once

#include <CLI/CLI.hpp>

#include <string>

#include "seatilt/kernel.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/tiling.hpp"

namespace seatilt::cli {

/// Whether informational lines go to stderr (a terminal, or --verbose).
bool chatty();
void set_verbose(bool on);

/// Prints "seatilt: error: MESSAGE" as one line on stderr.
void print_error(const std::string& message);

/// Prints an informational line when chatty().
void info(const std::string& message);

/// The whole command line, shell-quoted where needed (for history).
const std::string& command_line();
void set_command_line(int argc, char** argv);

/// Registers the `currents` subcommand's options.
CLI::App* add_currents(CLI::App& app);
/// Runs `currents` after parsing; returns the exit code (0, 5) or throws seatilt::Error.
int run_currents_command();
/// Registers the `inspect` subcommand's options.
CLI::App* add_inspect(CLI::App& app);
/// Runs `inspect` after parsing; returns the exit code or throws seatilt::Error.
int run_inspect_command();

}  // namespace seatilt::cli
