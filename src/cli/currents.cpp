// `seatilt currents`: parse options, build one CurrentsJob per input, run
// them, map failures to exit codes (one error line per failed input).
#include <omp.h>
#include <sys/stat.h>

#include <chrono>
#include <cstdlib>
#include <future>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "cli.hpp"
#include "seatilt/error.hpp"
#include "seatilt/parallel.hpp"
#include "seatilt/product.hpp"

namespace seatilt::cli {
namespace {

struct CurrentsArgs {
  std::vector<std::string> inputs;
  std::string output;
  std::string variable, units;
  int order = 2;
  std::string equator = "blend";
  double band = 5.0;
  std::string coast = "one-sided";
  std::string earth = "wgs84";
  std::string gravity = "standard";
  std::string fields = "all";
  int threads = 0;
  int deflate = 1;
  int significant_digits = 0;
  bool force = false;
  std::size_t rows = 0;
  std::size_t memory_mb = 256;
} args;

bool is_directory(const std::string& p) {
  struct stat st {};
  return ::stat(p.c_str(), &st) == 0 && S_ISDIR(st.st_mode);
}

std::string basename_no_nc(const std::string& path) {
  std::string b = path.substr(path.find_last_of('/') + 1);
  for (const char* ext : {".nc4", ".nc", ".cdf", ".netcdf"}) {
    const std::string e = ext;
    if (b.size() > e.size() && b.compare(b.size() - e.size(), e.size(), e) == 0) {
      b.resize(b.size() - e.size());
      break;
    }
  }
  return b;
}

bool same_file(const std::string& a, const std::string& b) {
  struct stat sa {}, sb {};
  return ::stat(a.c_str(), &sa) == 0 && ::stat(b.c_str(), &sb) == 0 && sa.st_dev == sb.st_dev &&
         sa.st_ino == sb.st_ino;
}

CurrentsOptions resolve_options() {
  CurrentsOptions o;
  o.order = args.order;
  o.equator = equator_option(args.equator);
  o.equator_band_deg = args.band;
  o.coast = coast_option(args.coast);
  o.earth = earth_option(args.earth);
  gravity_option(args.gravity, o.gravity, o.gravity_value);
  validate(o);
  return o;
}


CLI::App* add_currents(CLI::App& app) {
  CLI::App* c = app.add_subcommand(
      "currents", "compute geostrophic surface currents and kinematics from height files");
  c->fallthrough();
  c->add_option("inputs", args.inputs, "input netCDF files of sea-surface height")->required();
  c->add_option("-o,--output", args.output,
                "output file, or folder (existing, or ending in /) for several inputs")
      ->required();
  c->add_option("--variable", args.variable, "height variable (default: detected by standard_name)");
  c->add_option("--units", args.units, "override the height variable's units (e.g. cm)");
  c->add_option("--order", args.order, "stencil order: 2, 4 or 6 (3-, 5-, 7-point)")
      ->capture_default_str();
  c->add_option("--equator", args.equator, "equatorial treatment: mask, beta, blend")
      ->capture_default_str();
  c->add_option("--equator-band", args.band, "half-width of the equatorial band (degrees)")
      ->capture_default_str();
  c->add_option("--coast", args.coast, "next to missing cells: one-sided, mask")
      ->capture_default_str();
  c->add_option("--earth", args.earth, "earth model: sphere, wgs84")->capture_default_str();
  c->add_option("--gravity", args.gravity, "standard, wgs84 or a number (m s-2)")
      ->capture_default_str();
  c->add_option("--fields", args.fields, "comma list of output fields, or all")
      ->capture_default_str();
  c->add_option("--threads", args.threads, "OpenMP threads (default: all cores)");
  c->add_option("--deflate", args.deflate, "deflate level 0..9")->capture_default_str();
  c->add_option("--significant-digits", args.significant_digits,
                "keep N significant digits (1..7, Granular BitRound; 0 = off)")
      ->capture_default_str();
  c->add_option("--rows", args.rows, "row band height (default: from --memory)");
  c->add_option("--memory", args.memory_mb, "memory budget for row bands (MB)")
      ->capture_default_str();
  c->add_flag("--force", args.force, "overwrite existing outputs");
  return c;
}

int run_currents_command() {
  const CurrentsOptions options = resolve_options();
  const std::vector<std::string> fields = parse_field_list(args.fields);
  if (args.threads < 0) throw UsageError("--threads: must be >= 0");
  if (args.threads > 0) omp_set_num_threads(args.threads);
  if (args.deflate < 0 || args.deflate > 9)
    throw UsageError("--deflate: " + std::to_string(args.deflate) + " is outside 0..9");
  if (args.significant_digits < 0 || args.significant_digits > 7)
    throw UsageError("--significant-digits: " + std::to_string(args.significant_digits) +
                     " is outside 0..7");
  if (args.memory_mb < 16) throw UsageError("--memory: at least 16 MB");

  const bool to_dir = !args.output.empty() &&
                      (args.output.back() == '/' || is_directory(args.output));
  if (args.inputs.size() > 1 && !to_dir)
    throw UsageError("-o: several inputs need an output folder (existing, or ending in /), got '" +
                     args.output + "'");
  if (to_dir && !is_directory(args.output))
    throw OutputError(args.output + ": output folder does not exist");

  // Under mpirun each rank takes every size()-th input (parallel.hpp); serial
  // runs own them all. Each output is published (fsync + rename,
  // run_currents_unpublished in tiling.hpp) on a helper thread while the next
  // input is computed; its line is printed once it is published.
  ParallelSession mpi;
  std::size_t failed = 0, owned = 0;
  Error last_error(ExitCode::ok, "");
  const auto fail_one = [&](const Error& e) {
    if (args.inputs.size() == 1 && !mpi.active()) throw e;
    print_error(e.what());
    last_error = e;
    ++failed;
  };
  struct Publishing {
    std::string output;
    CurrentsSummary summary;
    double compute_seconds = 0;
    std::future<double> seconds;  // of the publication
  };
  std::optional<Publishing> publishing;
  const auto settle = [&] {
    if (!publishing) return;
    Publishing p = std::move(*publishing);
    publishing.reset();
    try {
      const double secs = p.compute_seconds + p.seconds.get();
      const CurrentsSummary& s = p.summary;
      info(p.output + ": " + std::to_string(s.steps) + " step(s), " + std::to_string(s.cells) +
           " cells, " + std::to_string(s.cells - s.valid) + " masked, " +
           std::to_string(s.flagged) + " flagged, " + std::to_string(secs) + " s");
    } catch (const Error& e) {
      fail_one(e);
    }
  };
  for (std::size_t k = 0; k < args.inputs.size(); ++k) {
    if (!mpi.owns(k)) continue;
    ++owned;
    const std::string& input = args.inputs[k];
    CurrentsJob job;
    job.input = input;
    job.output = to_dir ? (args.output.back() == '/' ? args.output : args.output + "/") +
                              basename_no_nc(input) + "_currents.nc"
                        : args.output;
    job.reader.variable = args.variable;
    job.reader.units = args.units;
    job.options = options;
    job.fields = fields;
    job.writer.deflate = args.deflate;
    job.writer.significant_digits = args.significant_digits;
    job.writer.force = args.force;
    job.command_line = command_line();
    job.band_rows = args.rows;
    job.memory_bytes = args.memory_mb << 20;
    try {
      if (same_file(job.input, job.output))
        throw OutputError(job.output + ": output would overwrite its own input");
      const auto start = std::chrono::steady_clock::now();
      std::optional<Writer> pending;
      CurrentsSummary s = run_currents_unpublished(job, pending);
      const double secs =
          std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
      settle();  // the previous output, published meanwhile
      auto writer = std::make_shared<Writer>(std::move(*pending));
      publishing = Publishing{job.output, std::move(s), secs,
                              std::async(std::launch::async, [writer] {
                                const auto t0 = std::chrono::steady_clock::now();
                                writer->publish();
                                return std::chrono::duration<double>(
                                           std::chrono::steady_clock::now() - t0)
                                    .count();
                              })};
    } catch (const Error& e) {
      settle();
      fail_one(e);
    }
  }
  settle();
  if (failed > 0)
    info(std::to_string(failed) + " of " + std::to_string(owned) + " inputs failed");
  // No failure: 0. Every input failed: the batch did nothing, report the
  // (last) cause itself. Otherwise 5. Combined over ranks under MPI.
  return mpi.batch_exit_code(failed, owned, static_cast<int>(last_error.code()));
}

}  // namespace

const bool registered_currents = register_command({"currents", add_currents, run_currents_command});

}  // namespace seatilt::cli
