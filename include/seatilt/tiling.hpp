// seatilt/tiling.hpp — row bands with halos and the streaming `currents` pipeline.
//
// Owns: splitting a grid into row bands (aligned to the output chunk rows),
// the halo each band needs (velocity stencil + diagnostic stencil), the band
// height chosen from a memory budget, the threads, and the pipeline
// reader -> kernel -> diagnostics -> writer over time steps and bands, so that
// only a few bands of every field are in memory at once. Numbers flow one
// way; this module only moves rows between the other modules. Projected and
// curvilinear inputs (docs/projected.md) run through the same pipeline with
// the Curvilinear kernels on a CurvilinearGrid built once per input.
//
// Threads: the thread that calls run_currents makes every netCDF-C and HDF5
// call (netCDF-C is not thread-safe; CHUNK_IO.md pitfall 8): it fetches the
// stored input chunks of band k+1 (Reader::fetch_rows) and stores the
// compressed output chunks of band k-1 (Writer::store) while a team of
// omp_get_max_threads() OpenMP threads (--threads) runs the rest as tasks:
// decompressing input chunks, unpacking heights, the kernel and diagnostics
// in blocks of 16 rows, converting to float32, and packing + shuffling +
// deflating each output chunk (Writer::encode_rows). Older bands' tasks run
// first. See docs/performance.md for measurements.
//
// Memory: about 2 x nx x (86 R + 50 h) bytes for bands of R rows with halo
// h (two bands in flight; per cell of a band row: fetched input 8, heights 8,
// u and v 16, flags 1, the nine outputs in their stored types 33 and their
// compressed copies ~20), plus the input chunks that cover a band (when the
// input's chunks are taller than the band, whole chunks). Band height
// without --rows: the largest multiple of the output chunk rows that fits
// --memory by this model, but no more than ~24 MiB of band buffers (at
// least one chunk row): small bands stay in the caches, reuse their pages
// and measured as fast or faster (docs/performance.md). Large buffers are
// recycled between bands and between the inputs of a batch, up to --memory.
//
// Determinism: every output cell depends only on input cells, never on the
// band or thread layout, and chunks are stored in a fixed order, so results
// are bit-identical for any --threads and band height (tested).
//
// Environment: SEATILT_CHUNK_IO=netcdf reads and writes every value through
// netCDF-C (nc_get_vara / nc_put_vara), SEATILT_CHUNK_IO=zlib compresses with
// zlib instead of libdeflate (for comparisons; docs/performance.md).
#pragma once

#include <cstddef>
#include <optional>
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

/// Returns the band height R that fits MEMORY_BYTES for an NX-column grid
/// with halo H rows, by the memory model above (2 nx (86 R + 50 H) bytes),
/// rounded down to a multiple of ALIGN (at least ALIGN, at most NY).
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
  /// Called before each row band (null = none); it may throw to abandon the
  /// run, which then leaves nothing at the output path (the `run` job loop
  /// stops on SIGTERM this way and reports progress).
  void (*between_bands)() = nullptr;
};

/// What a run did (for logs and the demo summary).
struct CurrentsSummary {
  std::size_t steps = 0;
  std::size_t cells = 0;     ///< steps * ny * nx
  std::size_t valid = 0;     ///< cells with u, v
  std::size_t flagged = 0;   ///< cells with any quality bit set
  std::size_t band_rows = 0;
  std::string read_path;   ///< Reader::read_path(), e.g. "raw chunks (shuffle+deflate)"
  std::string write_path;  ///< Writer::write_path(), e.g. "direct chunk writes (libdeflate)"
};

/// Builds the grid of a projected or curvilinear input (INFO.grid_kind not
/// lat_lon; docs/projected.md): PROJ node positions and metrics for x/y with a
/// grid mapping (the CRS's ellipsoid), or the metric of 2-D latitude/longitude
/// on the figure of EARTH. For a projected input that also has 2-D
/// latitude/longitude, checks that they lie within a quarter of a grid
/// spacing of the projection's node positions (NaN ones are skipped). Throws
/// InputError "FILE: variable V: problem" (V the grid mapping variable or the
/// 2-D coordinate) for an unknown or inconsistent grid mapping, nodes outside
/// the projection, disagreeing or degenerate coordinates.
CurvilinearGrid make_curvilinear_grid(const HeightInfo& info, EarthModel earth);

/// Runs JOB (any GridKind: projected and curvilinear inputs run through the
/// Curvilinear kernels and write x/y, the grid mapping and 2-D latitude/
/// longitude as docs/projected.md describes). Throws InputError (bad input, all-fill time step),
/// OutputError (cannot write; nothing left at the output path), UsageError (bad options).
CurrentsSummary run_currents(const CurrentsJob& job);

/// run_currents without the last step: the output is complete and closed but
/// not yet published; PENDING holds its Writer, and PENDING->publish() (fsync
/// and rename, no library calls: any thread) makes it appear at the output
/// path. A batch publishes one output while it computes the next (src/cli/
/// currents.cpp). PENDING destroyed unpublished removes the temporary file.
/// Same errors as run_currents (PENDING is left empty on error).
CurrentsSummary run_currents_unpublished(const CurrentsJob& job, std::optional<Writer>& pending);

}  // namespace seatilt
