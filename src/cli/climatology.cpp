// `seatilt climatology`: parse options, accumulate this rank's inputs, reduce
// the states over MPI ranks (when launched by mpirun), and let rank 0 write
// the climatology (or the partial state with --partial).
#include "seatilt/climatology.hpp"

#include <omp.h>

#include <chrono>
#include <cstdlib>
#include <string>
#include <vector>

#include "cli.hpp"
#include "seatilt/error.hpp"
#include "seatilt/parallel.hpp"
#include "seatilt/product.hpp"

namespace seatilt::cli {
namespace {

struct ClimatologyArgs {
  std::vector<std::string> inputs;
  std::string output;
  std::string by = "all";
  std::string from, to;
  double min_valid = 0.0;
  bool partial = false;
  std::string variable, units;
  int order = 2;
  std::string equator = "blend";
  double band = 5.0;
  std::string coast = "one-sided";
  std::string earth = "wgs84";
  std::string gravity = "standard";
  int threads = 0;
  int deflate = 1;
  std::size_t memory_mb = 256;
  bool force = false;
} args;

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

CLI::App* add_climatology(CLI::App& app) {
  CLI::App* c = app.add_subcommand(
      "climatology",
      "mean, variance, eddy kinetic energy and variance axes of the geostrophic currents of many "
      "height (or currents) files, by month, season or for the whole record");
  c->fallthrough();
  c->add_option("inputs", args.inputs,
                "height files (currents computed on the fly) or seatilt currents outputs")
      ->required();
  c->add_option("-o,--output", args.output, "output netCDF file")->required();
  c->add_option("--by", args.by, "all, month or season (DJF, MAM, JJA, SON)")
      ->capture_default_str();
  c->add_option("--from", args.from, "first date to use, YYYY-MM-DD (inclusive)");
  c->add_option("--to", args.to, "last date to use, YYYY-MM-DD (inclusive)");
  c->add_option("--min-valid", args.min_valid,
                "mask cells valid in less than this share (0..1) of the period's maps")
      ->capture_default_str();
  c->add_flag("--partial", args.partial,
              "write the accumulator state for `seatilt merge` instead of the statistics");
  c->add_option("--variable", args.variable,
                "height variable (default: detected by standard_name)");
  c->add_option("--units", args.units, "override the height variable's units (e.g. cm)");
  c->add_option("--order", args.order, "stencil order: 2, 4 or 6")->capture_default_str();
  c->add_option("--equator", args.equator, "equatorial treatment: mask, beta, blend")
      ->capture_default_str();
  c->add_option("--equator-band", args.band, "half-width of the equatorial band (degrees)")
      ->capture_default_str();
  c->add_option("--coast", args.coast, "next to missing cells: one-sided, mask")
      ->capture_default_str();
  c->add_option("--earth", args.earth, "earth model: sphere, wgs84")->capture_default_str();
  c->add_option("--gravity", args.gravity, "standard, wgs84 or a number (m s-2)")
      ->capture_default_str();
  c->add_option("--threads", args.threads, "OpenMP threads per process (default: all cores)");
  c->add_option("--deflate", args.deflate, "deflate level 0..9")->capture_default_str();
  c->add_option("--memory", args.memory_mb, "memory budget for the row bands (MB)")
      ->capture_default_str();
  c->add_flag("--force", args.force, "overwrite an existing output");
  return c;
}

int run_climatology_command() {
  // Every check that depends only on the command line comes first: all ranks
  // fail alike before MPI starts.
  ClimatologyJob job;
  job.options = resolve_options();
  job.reader.variable = args.variable;
  job.reader.units = args.units;
  job.period = parse_climatology_period(args.by);
  if (!args.from.empty()) job.from = parse_ymd(args.from, "--from");
  if (!args.to.empty()) job.to = parse_ymd(args.to, "--to");
  if (job.from && job.to && *job.to < *job.from)
    throw UsageError("--from " + job.from->iso() + " is after --to " + job.to->iso());
  if (!(args.min_valid >= 0.0 && args.min_valid <= 1.0))
    throw UsageError("--min-valid: " + std::to_string(args.min_valid) + " is outside 0..1");
  if (args.threads < 0) throw UsageError("--threads: must be >= 0");
  if (args.threads > 0) omp_set_num_threads(args.threads);
  if (args.deflate < 0 || args.deflate > 9)
    throw UsageError("--deflate: " + std::to_string(args.deflate) + " is outside 0..9");
  if (args.memory_mb < 16) throw UsageError("--memory: at least 16 MB");
  job.memory_bytes = args.memory_mb << 20;

  ClimatologyOutputOptions out;
  out.path = args.output;
  out.min_valid = args.min_valid;
  out.deflate = args.deflate;
  out.force = args.force;
  out.command_line = command_line();

  ParallelSession mpi;
  // Fail early (before hours of reading) when the output cannot be written.
  int code = 0;
  std::string message;
  if (mpi.root()) {
    try {
      check_output_target(out.path, out.force);
    } catch (const Error& e) {
      code = static_cast<int>(e.code());
      message = e.what();
    }
  }
  if (const int all = mpi.max_over_ranks(code); all != 0) {
    if (code != 0) print_error(message);
    return all;
  }

  const auto start = std::chrono::steady_clock::now();
  ClimatologyState state;
  std::size_t done = 0;
  for (std::size_t k = 0; k < args.inputs.size() && code == 0; ++k) {
    if (!mpi.owns(k)) continue;
    try {
      accumulate(args.inputs[k], job, state);
      ++done;
    } catch (const Error& e) {
      code = static_cast<int>(e.code());
      message = e.what();
    }
  }
  if (const int all = mpi.max_over_ranks(code); all != 0) {
    if (code != 0) print_error(message);
    return all;
  }
  if (mpi.size() > 1)
    info("rank " + std::to_string(mpi.rank()) + ": " + std::to_string(done) + " input(s) in " +
         std::to_string(
             std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count()) +
         " s");

  const ReduceFailure failure = reduce_states(mpi, state);
  if (mpi.root()) {
    try {
      if (failure.code != 0) {
        code = failure.code;
        message = failure.message;
      } else if (args.partial) {
        write_partial(state, out);
      } else {
        write_climatology(state, out);
      }
    } catch (const Error& e) {
      code = static_cast<int>(e.code());
      message = e.what();
    }
    if (code != 0)
      print_error(message);
    else
      info(out.path + ": " + std::to_string(state.inputs) + " input(s), " +
           std::to_string(
               std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count()) +
           " s");
  }
  return mpi.max_over_ranks(code);
}

}  // namespace

const bool registered_climatology =
    register_command({"climatology", add_climatology, run_climatology_command});

}  // namespace seatilt::cli
