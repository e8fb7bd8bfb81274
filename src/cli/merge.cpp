// `seatilt merge`: combine partial climatology states (written by
// `seatilt climatology --partial`) into the climatology of all their inputs,
// or into one larger partial state with --partial. Under mpirun the partials
// are dealt to ranks and reduced like `climatology` does.
#include <omp.h>

#include <string>
#include <utility>
#include <vector>

#include "cli.hpp"
#include "seatilt/climatology.hpp"
#include "seatilt/error.hpp"
#include "seatilt/parallel.hpp"

namespace seatilt::cli {
namespace {

struct MergeArgs {
  std::vector<std::string> inputs;
  std::string output;
  double min_valid = 0.0;
  bool partial = false;
  int threads = 0;
  int deflate = 1;
  bool force = false;
} args;

CLI::App* add_merge(CLI::App& app) {
  CLI::App* c = app.add_subcommand(
      "merge",
      "combine partial climatology states (climatology --partial) exactly into one result");
  c->fallthrough();
  c->add_option("inputs", args.inputs, "partial-state files")->required();
  c->add_option("-o,--output", args.output, "output netCDF file")->required();
  c->add_option("--min-valid", args.min_valid,
                "mask cells valid in less than this share (0..1) of the period's maps")
      ->capture_default_str();
  c->add_flag("--partial", args.partial,
              "write the combined accumulator state, not the statistics");
  c->add_option("--threads", args.threads, "OpenMP threads per process (default: all cores)");
  c->add_option("--deflate", args.deflate, "deflate level 0..9")->capture_default_str();
  c->add_flag("--force", args.force, "overwrite an existing output");
  return c;
}

int run_merge_command() {
  if (!(args.min_valid >= 0.0 && args.min_valid <= 1.0))
    throw UsageError("--min-valid: " + std::to_string(args.min_valid) + " is outside 0..1");
  if (args.threads < 0) throw UsageError("--threads: must be >= 0");
  if (args.threads > 0) omp_set_num_threads(args.threads);
  if (args.deflate < 0 || args.deflate > 9)
    throw UsageError("--deflate: " + std::to_string(args.deflate) + " is outside 0..9");
  ClimatologyOutputOptions out;
  out.path = args.output;
  out.min_valid = args.min_valid;
  out.deflate = args.deflate;
  out.force = args.force;
  out.command_line = command_line();

  ParallelSession mpi;
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

  ClimatologyState state;
  std::string first_partial;
  for (std::size_t k = 0; k < args.inputs.size() && code == 0; ++k) {
    if (!mpi.owns(k)) continue;
    try {
      ClimatologyState part = read_partial(args.inputs[k]);
      if (first_partial.empty()) first_partial = args.inputs[k];
      state.merge(std::move(part), args.inputs[k], first_partial);
    } catch (const Error& e) {
      code = static_cast<int>(e.code());
      message = e.what();
    }
  }
  if (const int all = mpi.max_over_ranks(code); all != 0) {
    if (code != 0) print_error(message);
    return all;
  }

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
      info(out.path + ": merged " + std::to_string(args.inputs.size()) + " partial state(s) of " +
           std::to_string(state.inputs) + " input(s)");
  }
  return mpi.max_over_ranks(code);
}

}  // namespace

const bool registered_merge = register_command({"merge", add_merge, run_merge_command});

}  // namespace seatilt::cli
