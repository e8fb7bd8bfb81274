// `seatilt section`: transport across sections (polylines) as a time series.
// Parses options, builds one SectionJob, runs it; no numerics here.
#include "seatilt/section.hpp"

#include <cmath>
#include <cstdlib>
#include <string>
#include <vector>

#include "cli.hpp"
#include "seatilt/error.hpp"

namespace seatilt::cli {
namespace {

struct SectionArgs {
  std::vector<std::string> inputs;
  std::string output;
  std::string line, name = "line", sections_file;
  double spacing_km = 0.0;
  double depth_m = 0.0;
  std::string variable, units;
  std::string earth = "wgs84";
  std::string gravity = "standard";
  double band = 5.0;
  bool force = false;
} sargs;

SectionOptions resolve_section_options(const CLI::App& c) {
  SectionOptions o;
  if (c.count("--spacing") && !(sargs.spacing_km > 0.0 && std::isfinite(sargs.spacing_km)))
    throw UsageError("--spacing: must be a distance > 0 in km");
  o.spacing_m = sargs.spacing_km * 1e3;
  if (c.count("--depth") && !(sargs.depth_m > 0.0 && std::isfinite(sargs.depth_m)))
    throw UsageError("--depth: must be a depth > 0 in m");
  o.depth_m = sargs.depth_m;
  o.equator_band_deg = sargs.band;
  o.earth = earth_option(sargs.earth);
  gravity_option(sargs.gravity, o.gravity, o.gravity_value);
  validate(o);
  return o;
}

CLI::App* section_app = nullptr;

CLI::App* add_section(CLI::App& app) {
  CLI::App* c = app.add_subcommand(
      "section", "geostrophic transport across sections (polylines) as a time series");
  c->fallthrough();
  c->add_option("inputs", sargs.inputs, "input netCDF files of sea-surface height")->required();
  c->add_option("-o,--output", sargs.output, "output file: .csv or .nc (CF timeSeries)")
      ->required();
  c->add_option("--line", sargs.line,
                "section as \"LON LAT, LON LAT, ...\" (degrees; joined by geodesics)");
  c->add_option("--name", sargs.name, "name of the --line section")->capture_default_str();
  c->add_option("--sections", sargs.sections_file,
                "TOML file of [[section]] tables with name and line");
  c->add_option("--spacing", sargs.spacing_km,
                "sample spacing in km (default: about the grid spacing)");
  c->add_option("--depth", sargs.depth_m,
                "depth in m for volume transport (equivalent-barotropic assumption)");
  c->add_option("--variable", sargs.variable,
                "height variable (default: detected by standard_name)");
  c->add_option("--units", sargs.units, "override the height variable's units (e.g. cm)");
  c->add_option("--earth", sargs.earth, "earth model: sphere, wgs84")->capture_default_str();
  c->add_option("--gravity", sargs.gravity, "standard, wgs84 or a number (m s-2)")
      ->capture_default_str();
  c->add_option("--equator-band", sargs.band,
                "half-width of the excluded equatorial band (degrees)")
      ->capture_default_str();
  c->add_flag("--force", sargs.force, "overwrite an existing output");
  section_app = c;
  return c;
}

int run_section_command() {
  SectionJob job;
  job.options = resolve_section_options(*section_app);
  if (section_app->count("--line")) {
    check_section_name(sargs.name, "--name");
    SectionLine l;
    l.name = sargs.name;
    l.points = parse_section_line(sargs.line, "--line");
    job.sections.push_back(std::move(l));
  } else if (section_app->count("--name")) {
    throw UsageError("--name: only with --line");
  }
  if (!sargs.sections_file.empty())
    for (SectionLine& l : read_section_file(sargs.sections_file))
      job.sections.push_back(std::move(l));
  if (job.sections.empty()) throw UsageError("no section: give --line or --sections");
  job.inputs = sargs.inputs;
  job.output = sargs.output;
  job.reader.variable = sargs.variable;
  job.reader.units = sargs.units;
  job.force = sargs.force;
  job.command_line = command_line();
  const SectionSummary s = run_sections(job);
  info(job.output + ": " + std::to_string(s.rows) + " row(s) from " + std::to_string(s.steps) +
       " time step(s) x " + std::to_string(job.sections.size()) + " section(s); excluded share " +
       std::to_string(s.min_excluded_fraction) + ".." + std::to_string(s.max_excluded_fraction));
  return 0;
}

}  // namespace

const bool registered_section = register_command({"section", add_section, run_section_command});

}  // namespace seatilt::cli
