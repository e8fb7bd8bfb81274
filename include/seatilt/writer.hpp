// seatilt/writer.hpp — CF netCDF-4 output with atomic publish.
//
// Owns: creating the output file under a temporary name in the output's
// folder, defining dimensions and coordinate variables copied from the input
// (same names, values, attributes and order; time as the unlimited
// dimension), defining the output variables (float32 with _FillValue, or a
// byte quality flag), deflate + shuffle compression, chunking, netCDF-C
// quantisation with the CF-1.12 quantization container, writing rows, and
// renaming to the final path on commit(). Destruction without commit()
// removes the temporary file, so a failed run never leaves a file at the
// output path. Does not decide names or meanings of variables (the caller
// passes them as OutputVariable) and does no arithmetic beyond NaN -> fill
// and double -> float conversion.
//
// References
//  [1] CF Conventions 1.12: 2.5.1 (_FillValue), 3.5 (flags), 8.4 (quantization).
//  [2] netCDF-C 4.9 API: nc_def_var_chunking, nc_def_var_deflate,
//      nc_def_var_quantize (NC_QUANTIZE_GRANULARBR).
//
// Thread safety: netCDF-C is not thread-safe; call a Writer from one thread,
// except encode_rows (no library calls), which any thread may call.
#pragma once

#include <cfloat>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "seatilt/chunkio.hpp"
#include "seatilt/grid.hpp"
#include "seatilt/reader.hpp"

namespace seatilt {

/// Storage of an output variable.
enum class OutputType {
  float32,  ///< NC_FLOAT, _FillValue = 9.96921e36 (netCDF default float fill)
  flag8,    ///< NC_BYTE quality flags, no _FillValue (every cell has a flag)
};

/// An output variable on (time, lat, lon) or (lat, lon) like the input.
/// ATTRS are written in order after _FillValue: NC_CHAR/NC_STRING as text
/// (NC_CHAR), numeric ones with their nc_type (NC_ERANGE -> OutputError).
/// Names that netCDF reserves or that the writer owns (_FillValue,
/// _NCProperties, _Storage, ...) are ignored.
struct OutputVariable {
  std::string name;
  OutputType type = OutputType::float32;
  std::vector<Attribute> attrs;  ///< standard_name, long_name, units, flag_masks, ...
};

/// How chunks of the output variables reach the file.
enum class ChunkWrites {
  /// Compressed by seatilt on every OpenMP thread and stored with HDF5's
  /// direct chunk write on a file netCDF-C defined (../shared/CHUNK_IO.md),
  /// whenever the settings allow (not with significant_digits > 0, whose
  /// quantisation netCDF-C applies); netCDF-C otherwise.
  automatic,
  netcdf,  ///< always nc_put_vara (netCDF-C compresses on the calling thread)
};

/// How to write.
struct WriterSettings {
  int deflate = 1;             ///< 0..9 (0 = no compression), with shuffle when > 0
  int significant_digits = 0;  ///< 0 = off; 1..7 = Granular BitRound, float32 variables only
  bool force = false;          ///< overwrite an existing output
  std::vector<Attribute> global_attrs;  ///< written in this order after the coordinates
  ChunkWrites chunk_writes = ChunkWrites::automatic;
  chunkio::Codec codec = chunkio::Codec::libdeflate;  ///< deflate library on the direct path
};

/// The float32 stored for a value V of a float variable: V rounded to the
/// nearest float, or the _FillValue NC_FILL_FLOAT (9.9692099683868690e+36)
/// when V is not finite or |V| > FLT_MAX (IEEE 754 binary32).
inline float output_float(double v) {
  return std::fabs(v) <= static_cast<double>(FLT_MAX) ? static_cast<float>(v)
                                                       : 9.9692099683868690e+36f;
}

/// Rows of one variable and time step prepared by Writer::encode_rows for
/// Writer::store: compressed chunks (direct path) or plain values.
struct EncodedRows {
  std::size_t var = 0, t = 0, j0 = 0, nrows = 0;
  std::vector<std::vector<unsigned char>> chunks;  ///< direct path: stored bytes, chunk row-major
  std::vector<unsigned char> values;               ///< netCDF path: nrows x nx values
};

// File layout written by Writer (netCDF-4, not the classic model):
//  - dimensions: time (NC_UNLIMITED, when LAYOUT has time), lat, lon, named
//    as in the input; coordinate variables with the input's names, values
//    (all nt time steps written at construction) and nc_type, except that an
//    integer or float type that cannot hold every unpacked value exactly
//    becomes NC_DOUBLE; coordinate attributes copied except packing and
//    missing-data ones (_FillValue, scale_factor, add_offset, missing_value,
//    valid_*, _Unsigned);
//  - projected and curvilinear layouts (HeightInfo::grid_kind): a coordinate
//    variable with an empty name is left out (the dimension stays); the grid
//    mapping variable is copied as a scalar NC_INT with its attributes; 2-D
//    latitude/longitude (lat2d, lon2d) become NC_DOUBLE auxiliary coordinates
//    on the grid dimensions with their attributes (docs/projected.md);
//  - every output variable chunked (1, chunk_rows, nx) or (chunk_rows, nx),
//    chunk_rows = clamp(ceil(262144 / nx), 1, ny) (~1 MiB float32 chunks),
//    deflate + shuffle when deflate > 0, an HDF5 chunk cache of two chunks
//    per variable (not netCDF's 16 MiB); cells never written read back as
//    _FillValue (float32) or -127 (NC_FILL_BYTE, flag8);
//  - with significant_digits N > 0: Granular BitRound on float32 variables,
//    attributes quantization = "quantization_info" and quantization_nsd = N
//    (NC_INT), and the scalar NC_INT container variable "quantization_info"
//    (algorithm = "granular_bitround", implementation = "libnetcdf version
//    X.Y.Z") [1] 8.4;
//  - the temporary file ".<basename>.tmp-<pid>-<random>" in PATH's folder.
// Direct path (ChunkWrites::automatic, significant_digits 0): netCDF-C
// defines the file and writes the coordinates, closes it; HDF5 reopens it,
// reads each variable's chunk shape, filters, byte order and fill value back
// from the file, sets the final extent of the unlimited dimension, and
// chunks are padded with the fill value, shuffled and deflated by seatilt on
// all OpenMP threads and stored once each with H5Dwrite_chunk. The file is
// reopened with netCDF-C for set_global_text. Readers get the values the
// netCDF-C path writes, bit for bit, and `ncdump -h -s` is identical (tested).
// write_rows/write_flags keep partly written chunk rows in memory until every
// row of them has arrived (or commit(), which pads the rest with fill).
// Error messages: "PATH: variable V: <nc_strerror> (<action>)" for netCDF
// failures, "PATH: <problem>" otherwise (PATH = the final path).

/// Publication helpers shared by every command that writes a file through a
/// temporary sibling (writer, section, profile, climatology).
/// fsync of a file or, with FOLDER, a folder; returns 0 or an errno.
/// EINVAL/EROFS (no sync support, e.g. some special file systems) count as
/// success.
int sync_path(const std::string& path, bool folder);
/// rename(2) that fails with EEXIST instead of replacing TO (Linux renameat2
/// RENAME_NOREPLACE; check-then-rename where unsupported). Returns 0 or an
/// errno.
int rename_noreplace(const std::string& from, const std::string& to);

/// Writes one output file. Move-only.
class Writer {
public:
  /// Creates PATH's temporary sibling and defines everything. LAYOUT gives
  /// dimension names and coordinate variables (lat, lon, optional time).
  /// Throws OutputError when PATH exists and !settings.force, when its folder
  /// does not exist or is not writable, when PATH is a folder, when a
  /// coordinate is empty, or when netCDF refuses the definition (e.g. two
  /// variables of one name); UsageError for deflate outside 0..9 or
  /// significant_digits outside 0..NC_QUANTIZE_MAX_FLOAT_NSD (7 in netCDF-C
  /// 4.9; checked before any file is created). A moved-from Writer throws
  /// OutputError from the write, set and commit members.
  Writer(const std::string& path, const HeightInfo& layout,
         std::vector<OutputVariable> variables, const WriterSettings& settings);
  ~Writer();
  Writer(Writer&&) noexcept;
  Writer& operator=(Writer&&) noexcept;
  Writer(const Writer&) = delete;
  Writer& operator=(const Writer&) = delete;

  /// Rows per chunk along latitude; callers align their row bands to it.
  [[nodiscard]] std::size_t chunk_rows() const;

  /// Writes ROWS (rows.nx == nx) of float variable VAR (index into the
  /// variables given) at time step T (0 without time), starting at row J0.
  /// Non-finite values and |values| > FLT_MAX become _FillValue; the rest
  /// are rounded to the nearest float. Throws OutputError on failure and
  /// when VAR is not a float32 variable, T >= nt, J0 + rows.ny > ny or
  /// rows.nx != nx (the message names the variable).
  void write_rows(std::size_t var, std::size_t t, std::size_t j0, const Field& rows);

  /// Writes NROWS x nx flags of flag8 variable VAR at time step T, row J0.
  /// Flags are stored bit for bit in the signed NC_BYTE (128..255 read back
  /// as -128..-1). Throws OutputError like write_rows.
  void write_flags(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
                   const std::uint8_t* flags);

  /// Prepares rows [J0, J0 + NROWS) of variable VAR at step T for store():
  /// VALUES holds NROWS x nx elements of the variable's type (float32 as
  /// given by output_float, or flag bytes), row-major. On the direct path the
  /// rows must be whole chunk rows (J0 a multiple of chunk_rows(), J0 + NROWS
  /// a multiple of it or ny) and come out as compressed chunks. Makes no
  /// netCDF or HDF5 call: may run on any thread, concurrently with itself and
  /// with store(). Throws OutputError for bad indices or misaligned rows.
  void encode_rows(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
                   const void* values, EncodedRows& out) const;

  /// Stores rows prepared by encode_rows (H5Dwrite_chunk, or nc_put_vara).
  /// Call from the Writer's thread; each chunk row once. Throws OutputError.
  void store(const EncodedRows& rows);

  /// How chunks are written: "direct chunk writes (libdeflate)" or
  /// "netCDF-C (<reason>)".
  [[nodiscard]] const std::string& write_path() const;

  /// Sets (or replaces) a global text attribute before commit (e.g. a
  /// completion marker). Throws OutputError on failure.
  void set_global_text(const std::string& name, const std::string& value);

  /// Closes the file, fsyncs it and renames it to the final path (atomic on
  /// POSIX). Without force an output that appeared since construction is
  /// not replaced (Linux renameat2 RENAME_NOREPLACE): OutputError "output
  /// exists". Throws OutputError on failure (the temporary file is removed
  /// and a previous output at PATH is untouched) and when called twice.
  void commit();

  /// commit() in two steps, so that a batch can publish one output while it
  /// computes the next. close(): the last library call (flush, close; from
  /// the Writer's thread). publish(): fsync, rename to the final path and
  /// fsync of the folder — plain POSIX calls, no netCDF or HDF5, so it may
  /// run on another thread (never concurrently with another member of this
  /// Writer). Same errors and guarantees as commit(); a Writer destroyed
  /// between the two removes its temporary file. Throws OutputError when
  /// called out of order or twice.
  void close();
  void publish();

  /// Final output path.
  [[nodiscard]] const std::string& path() const;

private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace seatilt
