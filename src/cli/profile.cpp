// `seatilt profile`: geostrophic currents at depth (thermal wind from
// hydrography, referenced to the altimetric surface velocity or a level of no
// motion). Parses options into a ProfileJob and runs it; no numerics here.
#include <omp.h>
#include <sys/stat.h>

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <initializer_list>
#include <string>
#include <vector>

#include "cli.hpp"
#include "seatilt/error.hpp"
#include "seatilt/thermal.hpp"

namespace seatilt::cli {
namespace {

struct ProfileArgs {
  std::vector<std::string> heights;  // 0 or 1 file
  std::string hydrography;
  std::string output;
  std::string variable, units;
  std::string temperature, salinity, density_variable;
  std::string levels = "all";
  std::string reference = "surface";
  std::string fields;
  int order = 2;
  double band = 5.0;
  std::string coast = "one-sided";
  std::string earth = "wgs84";
  std::string gravity = "standard";
  double rho0 = 1025.0;
  int threads = 0;
  int deflate = 1;
  bool force = false;
  std::size_t rows = 0;
  std::size_t memory_mb = 256;
  std::string section;
  std::string section_name = "section";
  double section_spacing = 0.0;
} pargs;

bool same_file(const std::string& a, const std::string& b) {
  struct stat sa {}, sb {};
  return ::stat(a.c_str(), &sa) == 0 && ::stat(b.c_str(), &sb) == 0 && sa.st_dev == sb.st_dev &&
         sa.st_ino == sb.st_ino;
}

ThermalOptions resolve_options() {
  ThermalOptions o;
  o.order = pargs.order;
  o.equator_band_deg = pargs.band;
  o.rho0 = pargs.rho0;
  o.coast = coast_option(pargs.coast);
  o.earth = earth_option(pargs.earth);
  gravity_option(pargs.gravity, o.gravity, o.gravity_value);
  validate(o);
  return o;
}

CLI::App* add_profile(CLI::App& app) {
  CLI::App* c = app.add_subcommand(
      "profile", "geostrophic currents at depth: thermal wind from hydrography, referenced to "
                 "the surface velocity of a height file or to a level of no motion");
  c->fallthrough();
  c->add_option("heights", pargs.heights,
                "height file (absolute dynamic topography); optional with --reference no-motion")
      ->expected(0, 1);
  c->add_option("--density", pargs.hydrography,
                "hydrography file: temperature + salinity, or in-situ density, on depth or pressure levels")
      ->required();
  c->add_option("-o,--output", pargs.output, "output netCDF file")->required();
  c->add_option("--levels", pargs.levels,
                "comma list of output levels (m, or dbar for pressure levels), or all")
      ->capture_default_str();
  c->add_option("--reference", pargs.reference, "surface, or no-motion:LEVEL (m or dbar)")
      ->capture_default_str();
  c->add_option("--fields", pargs.fields, "extra output fields: density, du_dz, dv_dz, or all");
  c->add_option("--variable", pargs.variable, "height variable (default: detected by standard_name)");
  c->add_option("--units", pargs.units, "override the height variable's units (e.g. cm)");
  c->add_option("--temperature", pargs.temperature, "temperature variable (default: by standard_name)");
  c->add_option("--salinity", pargs.salinity, "salinity variable (default: by standard_name)");
  c->add_option("--density-variable", pargs.density_variable,
                "use this in-situ density variable instead of temperature and salinity");
  c->add_option("--order", pargs.order, "horizontal stencil order: 2, 4 or 6")->capture_default_str();
  c->add_option("--equator-band", pargs.band, "half-width of the masked equatorial band (degrees)")
      ->capture_default_str();
  c->add_option("--coast", pargs.coast, "next to missing cells: one-sided, mask")->capture_default_str();
  c->add_option("--earth", pargs.earth, "earth model: sphere, wgs84")->capture_default_str();
  c->add_option("--gravity", pargs.gravity, "standard, wgs84 or a number (m s-2)")->capture_default_str();
  c->add_option("--rho0", pargs.rho0, "Boussinesq reference density (kg m-3)")->capture_default_str();
  c->add_option("--threads", pargs.threads, "OpenMP threads (default: all cores)");
  c->add_option("--deflate", pargs.deflate, "deflate level 0..9")->capture_default_str();
  c->add_option("--rows", pargs.rows, "row band height (default: from --memory)");
  c->add_option("--memory", pargs.memory_mb, "memory budget for row bands (MB)")->capture_default_str();
  c->add_flag("--force", pargs.force, "overwrite an existing output");
  c->add_option("--section", pargs.section,
                "\"LON LAT, LON LAT, ...\": cross-section velocity and full-depth transport along this line");
  c->add_option("--section-name", pargs.section_name, "name of the section")->capture_default_str();
  c->add_option("--section-spacing", pargs.section_spacing,
                "sample spacing along the section (m; default about the grid spacing)");
  return c;
}

int run_profile_command() {
  ProfileJob job;
  job.options = resolve_options();
  job.reference = parse_reference(pargs.reference);
  job.levels = parse_levels(pargs.levels);
  job.fields = parse_profile_fields(pargs.fields.empty() ? "u,v" : pargs.fields);
  if (pargs.threads < 0) throw UsageError("--threads: must be >= 0");
  if (pargs.threads > 0) omp_set_num_threads(pargs.threads);
  if (pargs.memory_mb < 16) throw UsageError("--memory: at least 16 MB");
  if (pargs.deflate < 0 || pargs.deflate > 9)
    throw UsageError("--deflate: " + std::to_string(pargs.deflate) + " is outside 0..9");
  job.heights = pargs.heights.empty() ? std::string() : pargs.heights.front();
  if (job.heights.empty() && job.reference.kind == ThermalReference::surface)
    throw UsageError("profile: a height file is needed with --reference surface (or give "
                     "--reference no-motion:LEVEL)");
  job.hydrography = pargs.hydrography;
  job.output = pargs.output;
  job.height_reader.variable = pargs.variable;
  job.height_reader.units = pargs.units;
  job.hydro.temperature = pargs.temperature;
  job.hydro.salinity = pargs.salinity;
  job.hydro.density = pargs.density_variable;
  job.deflate = pargs.deflate;
  job.force = pargs.force;
  job.command_line = command_line();
  job.band_rows = pargs.rows;
  job.memory_bytes = pargs.memory_mb << 20;
  if (!pargs.section.empty()) {
    check_section_name(pargs.section_name, "--section-name");
    job.section = SectionLine{pargs.section_name, parse_section_line(pargs.section, "--section")};
    if (!(pargs.section_spacing >= 0.0 && pargs.section_spacing <= 1e7))
      throw UsageError("--section-spacing: must be in 0..1e7 m");
    job.section_spacing_m = pargs.section_spacing;
  }
  for (const std::string& in : {job.heights, job.hydrography})
    if (!in.empty() && same_file(in, job.output))
      throw OutputError(job.output + ": output would overwrite its own input");
  const auto start = std::chrono::steady_clock::now();
  const ProfileSummary s = run_profile(job);
  const double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  info(job.output + ": " + std::to_string(s.steps) + " step(s), " + std::to_string(s.levels) +
       " level(s), " + std::to_string(s.cells) + " cells, " + std::to_string(s.valid) + " valid, " +
       std::to_string(secs) + " s");
  for (std::size_t t = 0; t < s.section_transport.size(); ++t) {
    char buf[128];
    std::snprintf(buf, sizeof buf, "section '%s', step %zu: full-depth transport %.4f Sv",
                  pargs.section_name.c_str(), t, s.section_transport[t] / 1e6);
    info(buf);
  }
  return 0;
}

}  // namespace

const bool registered_profile = register_command({"profile", add_profile, run_profile_command});

}  // namespace seatilt::cli
