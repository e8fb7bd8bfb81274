// seatilt — entry point: parse the command line, run a subcommand, map errors
// to the exit codes of README.md.
#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <iostream>
#include <string>

#include "cli.hpp"
#include "seatilt/chunkio.hpp"
#include "seatilt/error.hpp"
#include "seatilt/product.hpp"
#include "seatilt/version.hpp"

namespace seatilt::cli {
namespace {
bool verbose_flag = false;
std::string the_command_line;

std::string quote(const std::string& s) {
  if (!s.empty() && s.find_first_of(" \t\n'\"\\$`*?[]{}()<>|&;#~") == std::string::npos) return s;
  std::string q = "'";
  for (char c : s) {
    if (c == '\'') q += "'\\''";
    else q += c;
  }
  return q + "'";
}

std::string versions() { return version_report(); }
}  // namespace

namespace {
std::vector<Command>& registry() {
  static std::vector<Command> r;
  return r;
}
}  // namespace

bool register_command(const Command& command) {
  auto& r = registry();
  r.push_back(command);
  std::sort(r.begin(), r.end(),
            [](const Command& a, const Command& b) { return std::string(a.name) < b.name; });
  return true;
}
const std::vector<Command>& commands() { return registry(); }

EquatorMethod equator_option(const std::string& text) {
  EquatorMethod m{};
  if (!parse_equator(text, m))
    throw UsageError("--equator: '" + text + "' is not one of mask, beta, blend");
  return m;
}
CoastMethod coast_option(const std::string& text) {
  CoastMethod m{};
  if (!parse_coast(text, m)) throw UsageError("--coast: '" + text + "' is not one of one-sided, mask");
  return m;
}
EarthModel earth_option(const std::string& text) {
  EarthModel m{};
  if (!parse_earth(text, m)) throw UsageError("--earth: '" + text + "' is not one of sphere, wgs84");
  return m;
}
void gravity_option(const std::string& text, GravityModel& model, double& value) {
  if (parse_gravity_name(text, model)) return;
  char* end = nullptr;
  const double g = std::strtod(text.c_str(), &end);
  if (end == text.c_str() || *end != '\0')
    throw UsageError("--gravity: '" + text + "' is not standard, wgs84 or a number in m s-2");
  model = GravityModel::constant;
  value = g;
}

bool chatty() { return verbose_flag || isatty(STDERR_FILENO) != 0; }
void set_verbose(bool on) { verbose_flag = on; }
void print_error(const std::string& message) {
  std::string m = message;
  for (char& c : m)
    if (c == '\n' || c == '\r') c = ' ';
  std::fprintf(stderr, "seatilt: error: %s\n", m.c_str());
}
void info(const std::string& message) {
  if (chatty()) std::fprintf(stderr, "seatilt: %s\n", message.c_str());
}
const std::string& command_line() { return the_command_line; }
void set_command_line(int argc, char** argv) {
  the_command_line.clear();
  for (int k = 0; k < argc; ++k) {
    if (k) the_command_line += ' ';
    the_command_line += quote(k == 0 ? std::string("seatilt") : std::string(argv[k]));
  }
}

}  // namespace seatilt::cli

int main(int argc, char** argv) {
  using namespace seatilt;
  chunkio::skip_hdf5_exit_cleanup();  // before any netCDF/HDF5 call (chunkio.hpp)
  cli::set_command_line(argc, argv);
  CLI::App app{"seatilt: geostrophic surface currents and their kinematics from "
               "sea-surface-height grids (CF netCDF in, CF netCDF out).\n"
               "Geostrophic surface currents are not total currents and are not for navigation."};
  app.require_subcommand(1);
  bool verbose = false;
  app.add_flag("--verbose", verbose, "informational lines on stderr even when not a terminal");
  app.set_version_flag("--version", cli::versions(), "print the version and library versions");
  std::vector<std::pair<CLI::App*, int (*)()>> subs;
  for (const cli::Command& c : cli::commands()) subs.emplace_back(c.add(app), c.run);
  try {
    app.parse(argc, argv);
    cli::set_verbose(verbose);
    for (const auto& [sub, run] : subs)
      if (sub->parsed()) return run();
    return static_cast<int>(ExitCode::usage);
  } catch (const CLI::CallForHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForAllHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForVersion&) {
    std::cout << cli::versions();
    return 0;
  } catch (const CLI::ParseError& e) {
    cli::print_error(std::string("usage: ") + e.what() + " (see seatilt --help)");
    return static_cast<int>(ExitCode::usage);
  } catch (const Error& e) {
    cli::print_error(e.what());
    return static_cast<int>(e.code());
  } catch (const std::exception& e) {
    cli::print_error(std::string("internal error: ") + e.what());
    return 70;
  }
}
