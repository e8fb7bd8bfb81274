// seatilt/tiling.hpp — row bands with halos and the streaming `currents` pipeline.
//
// Owns: splitting a grid into row bands (aligned to the output chunk rows),
// the halo each band needs (velocity stencil + diagnostic stencil), the band
// height chosen from a memory budget, the OpenMP thread count, and the loop
// reader -> kernel -> diagnostics -> writer over time steps and bands, so that
// at most one band of every field is in memory at once. Numbers flow one way;
// this module only moves rows between the other modules.
//
// Memory: per band of R rows on an nx-column grid, about
// (R + 4 h) * nx * 8 bytes for heights, (R + 2 h) * nx * 16 for u, v, and
// R * nx * (8 * 6 + 1) for diagnostics and flags, with h the stencil reach.
//
// Determinism: every output cell depends only on input cells, never on the
// band or thread layout, so results are bit-identical for any --threads and
// band height (tested).
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "seatilt/kernel.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/writer.hpp"

namespace seatilt {

/// A band of output rows [j0, j0 + n) of an ny-row grid.
struct Band {
  std::size_t j0 = 0, n = 0;
};

/// Splits NY rows into bands of ROWS (the last may be shorter); ROWS >= 1.
std::vector<Band> plan_bands(std::size_t ny, std::size_t rows);

/// Returns the band height that fits MEMORY_BYTES for an NX-column grid with
/// stencil reach H, rounded down to a multiple of ALIGN (>= ALIGN, <= NY).
std::size_t band_rows_for_budget(std::size_t nx, std::size_t ny, std::size_t h,
                                 std::size_t memory_bytes, std::size_t align);

/// One `currents` run: one input file to one output file.
struct CurrentsJob {
  std::string input;
  std::string output;
  ReaderOptions reader;
  CurrentsOptions options;
  std::vector<std::string> fields;  ///< from parse_field_list
  WriterSettings writer;            ///< global_attrs are filled in by run_currents
  std::string command_line;         ///< for the history attribute
  std::size_t band_rows = 0;        ///< 0 = from memory_bytes
  std::size_t memory_bytes = 256u << 20;
  /// Called on the calling thread before each row band; may throw to abandon
  /// the file (the writer then removes its temporary file). Used by `run` to
  /// honour SIGTERM/SIGINT between bands.
  void (*between_bands)() = nullptr;
};

/// What a run did (for logs and the demo summary).
struct CurrentsSummary {
  std::size_t steps = 0;
  std::size_t cells = 0;     ///< steps * ny * nx
  std::size_t valid = 0;     ///< cells with u, v
  std::size_t flagged = 0;   ///< cells with any quality bit set
  std::size_t band_rows = 0;
};

/// Runs JOB. Throws InputError (bad input, all-fill time step), OutputError
/// (cannot write; nothing left at the output path), UsageError (bad options).
CurrentsSummary run_currents(const CurrentsJob& job);

}  // namespace seatilt
