// writer.cpp — CF netCDF-4 output with atomic publish (see writer.hpp).
//
// Life of an output file:
//   1. checks: settings in range (UsageError), output folder exists and is
//      writable, PATH absent unless force (OutputError);
//   2. nc_create of ".<basename>.tmp-<pid>-<random>" beside PATH
//      (NC_NETCDF4 | NC_NOCLOBBER, so two runs never share a temporary);
//   3. define: dimensions (time unlimited), coordinate variables, output
//      variables (chunking, deflate + shuffle, quantize, chunk cache,
//      _FillValue, attributes), the CF quantization container, global
//      attributes; nc_enddef; coordinate values (all time steps);
//   4. direct path (writer.hpp): nc_close, HDF5 reopen, extents set, the
//      layout of every variable read back; write_rows / write_flags stage
//      chunk rows and compress complete ones on all threads, store() writes
//      them with H5Dwrite_chunk; set_global_text reopens with netCDF-C.
//      netCDF path: write_rows / write_flags / set_global_text in data mode;
//   5. commit: close (HDF5 or netCDF), fsync, rename(2) to PATH (renameat2 with
//      RENAME_NOREPLACE without force, so an output that appeared meanwhile
//      is not clobbered), fsync of the folder.
// Any failure, or destruction before commit, closes and unlinks the
// temporary file, so nothing is ever left at (or beside) the output path.
//
// Notation: nt, ny, nx = time steps, rows (latitude), columns (longitude);
// j0 = first row of a band; chunk_rows = rows per chunk; all sizes in
// elements unless named *_bytes.
#include "seatilt/writer.hpp"

#include <fcntl.h>
#include <netcdf.h>
#include <sys/stat.h>
#include <unistd.h>

#include <omp.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <cfloat>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <exception>
#include <map>
#include <random>
#include <set>
#include <sstream>
#include <utility>

#include "seatilt/error.hpp"

namespace seatilt {

namespace {

/// netCDF's default float fill, 9.9692099683868690e+36 (netcdf.h NC_FILL_FLOAT;
/// CF 1.12 2.5.1: readers treat _FillValue cells as missing).
constexpr float fill_float = NC_FILL_FLOAT;

/// Target chunk size in elements: 262144 float32 = 1 MiB (common practice for
/// HDF5 chunks of 0.1-4 MiB, no source).
constexpr std::size_t target_chunk_elements = 262144;

/// Name of the CF 1.12 8.4 quantization container variable.
constexpr const char* quantization_container = "quantization_info";

/// Attribute names that netCDF-C reserves or that describe storage rather
/// than meaning; never copied from a caller (the writer owns _FillValue).
bool reserved_attribute(const std::string& name) {
  static const std::set<std::string> names = {
      "_FillValue", "_NCProperties", "_Netcdf4Coordinates", "_Netcdf4Dimid",
      "_SuperblockVersion", "_IsNetcdf4", "_Format", "_Endianness", "_Storage",
      "_ChunkSizes", "_DeflateLevel", "_Shuffle", "_Fletcher32", "_NoFill",
      "_Filter", "_Codecs", "_NCZARR_ATTR", "_nczarr_attr",
      NC_QUANTIZE_BITGROOM_ATT_NAME, NC_QUANTIZE_GRANULARBR_ATT_NAME,
      NC_QUANTIZE_BITROUND_ATT_NAME};
  return names.count(name) > 0;
}

/// Coordinate attributes that no longer apply to the copy: packing and
/// missing data (values arrive unpacked and complete) and `bounds`.
bool packing_attribute(const std::string& name) {
  return name == "scale_factor" || name == "add_offset" || name == "missing_value" ||
         name == "valid_min" || name == "valid_max" || name == "valid_range" ||
         name == "_Unsigned" ||
         // Bounds variables are not copied, so a pointer to one would dangle
         // (CF 7.1 requires the named variable to exist).
         name == "bounds";
}

/// True when V is stored exactly by nc_type TYPE.
bool representable(int type, double v) {
  if (!std::isfinite(v)) return type == NC_DOUBLE || type == NC_FLOAT;
  const bool integral = v == std::trunc(v);
  switch (type) {
    case NC_DOUBLE: return true;
    case NC_FLOAT: return std::fabs(v) <= FLT_MAX && static_cast<double>(static_cast<float>(v)) == v;
    case NC_BYTE: return integral && v >= -128.0 && v <= 127.0;
    case NC_UBYTE: return integral && v >= 0.0 && v <= 255.0;
    case NC_SHORT: return integral && v >= -32768.0 && v <= 32767.0;
    case NC_USHORT: return integral && v >= 0.0 && v <= 65535.0;
    case NC_INT: return integral && v >= -2147483648.0 && v <= 2147483647.0;
    case NC_UINT: return integral && v >= 0.0 && v <= 4294967295.0;
    case NC_INT64: return integral && v >= -9223372036854775808.0 && v < 9223372036854775808.0;
    case NC_UINT64: return integral && v >= 0.0 && v < 18446744073709551616.0;
    default: return false;
  }
}

/// Storage type of an output coordinate: the input's numeric type when every
/// (unpacked) value fits it exactly, else NC_DOUBLE (e.g. a packed short
/// latitude whose unpacked values are fractional).
int coordinate_type(const CoordVar& c) {
  const int t = c.nc_type;
  if (t == NC_DOUBLE) return t;
  for (double v : c.values)
    if (!representable(t, v)) return NC_DOUBLE;
  return t;
}

bool numeric_type(int t) {
  return t == NC_BYTE || t == NC_UBYTE || t == NC_SHORT || t == NC_USHORT || t == NC_INT ||
         t == NC_UINT || t == NC_INT64 || t == NC_UINT64 || t == NC_FLOAT || t == NC_DOUBLE;
}

/// Folder and file name of PATH ("" name when PATH ends in '/').
std::pair<std::string, std::string> split_path(const std::string& path) {
  const auto slash = path.rfind('/');
  if (slash == std::string::npos) return {".", path};
  return {slash == 0 ? std::string("/") : path.substr(0, slash), path.substr(slash + 1)};
}

/// 32 random bits for the temporary name (std::random_device may throw when
/// no entropy source exists; the clock is enough to avoid collisions then,
/// since NC_NOCLOBBER refuses an existing name anyway).
std::uint32_t random_bits() {
  try {
    std::random_device rd;
    return static_cast<std::uint32_t>(rd());
  } catch (...) {
    return static_cast<std::uint32_t>(
        std::chrono::steady_clock::now().time_since_epoch().count());
  }
}

std::string errno_text(int err) { return std::strerror(err); }


struct VarSlot {
  std::string name;
  OutputType type = OutputType::float32;
  int varid = -1;
};

/// Staged chunk row of one variable and step (direct path, write_rows).
struct Stage {
  std::vector<unsigned char> values;  // rows x nx elements, fill where not written
  std::vector<char> filled;           // per row
  std::size_t missing = 0;            // rows not written yet
  bool queued = false;                // in Impl::complete
};
using StageKey = std::array<std::size_t, 3>;  // var, t, chunk row

/// Above this many bytes of complete staged chunk rows, write_rows compresses
/// and stores them (rule of thumb, no source: enough chunks for every thread,
/// little memory).
constexpr std::size_t flush_bytes = std::size_t{32} << 20;

}  // namespace

// Atomic publication helpers (writer.hpp).
// fsync of a file or folder; returns 0 or an errno. EINVAL/EROFS (no sync
// support, e.g. some special file systems) count as success.
int sync_path(const std::string& p, bool folder) {
  const int fd = ::open(p.c_str(), (folder ? O_RDONLY | O_DIRECTORY : O_RDONLY) | O_CLOEXEC);
  if (fd < 0) return errno;
  int err = 0;
  if (::fsync(fd) != 0 && errno != EINVAL && errno != EROFS) err = errno;
  ::close(fd);
  return err;
}

// rename(2) that fails with EEXIST instead of replacing TO (Linux
// renameat2; falls back to check-then-rename where unsupported).
int rename_noreplace(const std::string& from, const std::string& to) {
#ifdef RENAME_NOREPLACE
  if (::renameat2(AT_FDCWD, from.c_str(), AT_FDCWD, to.c_str(), RENAME_NOREPLACE) == 0) return 0;
  if (errno != EINVAL && errno != ENOSYS && errno != ENOTSUP) return errno;
#endif
  struct stat st {};
  if (::lstat(to.c_str(), &st) == 0) return EEXIST;
  return std::rename(from.c_str(), to.c_str()) == 0 ? 0 : errno;
}

struct Writer::Impl {
  std::string path;      // final output path
  std::string tmp_path;  // temporary sibling while open
  bool force = false;
  int ncid = -1;
  bool open = false;        // ncid valid
  bool tmp_exists = false;  // tmp_path is ours and must go unless committed
  bool committed = false;
  bool closed = false;      // close() done, publish() not yet
  bool has_time = false;
  std::size_t nt = 1, ny = 0, nx = 0, chunk_rows = 1;
  std::vector<VarSlot> vars;
  std::vector<float> fbuf;  // conversion buffer reused across write_rows

  // Direct path (writer.hpp). `open` stays true while either library holds
  // the file; nc_open_ tells which one does.
  bool direct = false;
  chunkio::Codec codec = chunkio::Codec::libdeflate;
  std::string write_path;
  bool nc_open_ = true;  // netCDF-C holds the file (else HDF5, when direct)
  std::unique_ptr<chunkio::H5File> h5;
  std::vector<chunkio::H5Chunked> h5vars;     // parallel to vars while HDF5 holds the file
  std::vector<chunkio::ChunkFormat> formats;  // per variable, read back from the file once
  std::map<StageKey, Stage> stages;
  std::vector<StageKey> complete;  // staged chunk rows with every row written, oldest first
  std::set<StageKey> stored;       // chunk rows written to the file
  int writeback_fd = -1;           // read-only descriptor of tmp_path for sync_file_range
  std::size_t unsynced = 0;        // bytes stored since writeback was last started

  /// Starts writing the stored chunks to disk in the background (Linux
  /// sync_file_range, SYNC_FILE_RANGE_WRITE: no waiting), so that the fsync
  /// of commit() has little left to wait for.
  void start_writeback() noexcept {
    if (writeback_fd >= 0 && unsynced > 0) {
#ifdef SYNC_FILE_RANGE_WRITE
      ::sync_file_range(writeback_fd, 0, 0, SYNC_FILE_RANGE_WRITE);
#endif
      unsynced = 0;
    }
  }

  Impl() = default;
  Impl(const Impl&) = delete;
  Impl& operator=(const Impl&) = delete;
  ~Impl() { discard(); }

  /// Closes (errors ignored) and removes the temporary file; never throws.
  void discard() noexcept {
    if (writeback_fd >= 0) {
      ::close(writeback_fd);
      writeback_fd = -1;
    }
    if (open) {
      h5vars.clear();
      h5.reset();
      if (nc_open_) nc_close(ncid);
      open = false;
    }
    if (tmp_exists) {
      ::unlink(tmp_path.c_str());
      tmp_exists = false;
    }
  }

  [[noreturn]] void fail(const std::string& variable, const std::string& problem) const {
    throw OutputError(input_message(path, variable, problem));
  }

  /// Throws "PATH: variable V: <nc_strerror> (ACTION)" when STATUS is an error.
  void check(int status, const std::string& variable, const std::string& action) const {
    if (status != NC_NOERR)
      fail(variable, std::string(nc_strerror(status)) + " (" + action + ")");
  }

  void put_attribute(int varid, const std::string& owner, const Attribute& a) const {
    const std::string what = "attribute " + a.name;
    if (a.name.empty()) fail(owner, "attribute with an empty name");
    if (a.nc_type == NC_CHAR || a.nc_type == NC_STRING) {
      check(nc_put_att_text(ncid, varid, a.name.c_str(), a.text.size(), a.text.c_str()), owner,
            "writing " + what);
    } else if (numeric_type(a.nc_type)) {
      check(nc_put_att_double(ncid, varid, a.name.c_str(), a.nc_type, a.values.size(),
                              a.values.data()),
            owner, "writing " + what);
    } else {
      fail(owner, what + ": unsupported nc_type " + std::to_string(a.nc_type));
    }
  }

  void check_folder_and_target();
  void create_temporary();
  int define_coordinate(const CoordVar& c, int dimid);
  void define_variables(const std::vector<OutputVariable>& variables, const int* dimids, int ndims,
                        int significant_digits, int deflate);
  const VarSlot& slot(std::size_t var, OutputType want, std::size_t t, std::size_t j0,
                      std::size_t nrows) const;
  void check_rows(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows) const;

  // direct path
  [[nodiscard]] std::size_t elem_size(std::size_t var) const {
    return vars[var].type == OutputType::float32 ? sizeof(float) : 1;
  }
  [[nodiscard]] std::size_t rows_in(std::size_t c) const {
    return std::min(chunk_rows, ny - c * chunk_rows);
  }
  std::string start_direct();
  void to_hdf5();
  void to_netcdf();
  void stage_rows(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
                  const unsigned char* values);
  Stage& stage_for(const StageKey& key);
  void flush(bool partial);
  void encode(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
              const unsigned char* values, EncodedRows& out) const;
  void store(const EncodedRows& rows);
};

void Writer::Impl::check_folder_and_target() {
  const auto [folder, name] = split_path(path);
  if (name.empty() || name == "." || name == "..") fail("", "output is not a file name");
  struct stat st {};
  if (::stat(folder.c_str(), &st) != 0) fail("", "output folder " + folder + ": " + errno_text(errno));
  if (!S_ISDIR(st.st_mode)) fail("", "output folder " + folder + ": " + errno_text(ENOTDIR));
  if (::access(folder.c_str(), W_OK | X_OK) != 0)
    fail("", "output folder " + folder + ": " + errno_text(errno));
  if (::lstat(path.c_str(), &st) == 0) {
    struct stat target {};
    if (::stat(path.c_str(), &target) == 0 && S_ISDIR(target.st_mode))
      fail("", "output is a folder");
    if (!force) fail("", "output exists (use --force to overwrite)");
  } else if (errno != ENOENT) {
    fail("", errno_text(errno));
  }
}

void Writer::Impl::create_temporary() {
  const auto slash = path.rfind('/');
  const std::string prefix = slash == std::string::npos ? std::string() : path.substr(0, slash + 1);
  const std::string name = path.substr(slash == std::string::npos ? 0 : slash + 1);
  int status = NC_NOERR;
  for (int attempt = 0; attempt < 4; ++attempt) {
    char tag[32];
    std::snprintf(tag, sizeof tag, "%ld-%08x", static_cast<long>(::getpid()),
                  static_cast<unsigned>(random_bits()));
    tmp_path = prefix + "." + name + ".tmp-" + tag;
    status = nc_create(tmp_path.c_str(), NC_NETCDF4 | NC_NOCLOBBER, &ncid);
    if (status == NC_NOERR) {
      open = true;
      tmp_exists = true;
      return;
    }
    if (status != NC_EEXIST && status != EEXIST) break;
  }
  fail("", std::string("cannot create temporary file ") + tmp_path + ": " + nc_strerror(status));
}

int Writer::Impl::define_coordinate(const CoordVar& c, int dimid) {
  int varid = -1;
  check(nc_def_var(ncid, c.name.c_str(), coordinate_type(c), 1, &dimid, &varid), c.name,
        "defining coordinate");
  for (const Attribute& a : c.attrs) {
    if (reserved_attribute(a.name) || packing_attribute(a.name)) continue;
    put_attribute(varid, c.name, a);
  }
  return varid;
}

void Writer::Impl::define_variables(const std::vector<OutputVariable>& variables, const int* dimids,
                                    int ndims, int significant_digits, int deflate) {
  // Chunk = one time step x chunk_rows full rows: a row band written by the
  // caller touches whole chunks when aligned to chunk_rows().
  const std::size_t chunk3[3] = {1, chunk_rows, nx};
  const std::size_t* chunks = ndims == 3 ? chunk3 : chunk3 + 1;
  bool any_quantized = false;
  for (const OutputVariable& ov : variables) {
    VarSlot s;
    s.name = ov.name;
    s.type = ov.type;
    if (ov.name.empty()) fail("", "output variable with an empty name");
    const bool is_float = ov.type == OutputType::float32;
    check(nc_def_var(ncid, ov.name.c_str(), is_float ? NC_FLOAT : NC_BYTE, ndims, dimids,
                     &s.varid),
          ov.name, "defining variable");
    check(nc_def_var_chunking(ncid, s.varid, NC_CHUNKED, chunks), ov.name, "setting chunking");
    if (deflate > 0)
      check(nc_def_var_deflate(ncid, s.varid, 1, 1, deflate), ov.name, "setting deflate");
    // Chunk cache of two chunks instead of netCDF's 16 MiB per variable:
    // enough for a row band that straddles a chunk boundary, so no chunk is
    // evicted half-written and recompressed (HDF5 H5Pset_chunk_cache; w0 =
    // 1 preempts fully written chunks first).
    const std::size_t chunk_bytes = chunk_rows * nx * (is_float ? sizeof(float) : 1);
    check(nc_set_var_chunk_cache(ncid, s.varid, 2 * chunk_bytes + 4096, 101, 1.0f), ov.name,
          "setting chunk cache");
    if (is_float) {
      check(nc_put_att_float(ncid, s.varid, "_FillValue", NC_FLOAT, 1, &fill_float), ov.name,
            "writing attribute _FillValue");
    }
    for (const Attribute& a : ov.attrs) {
      if (reserved_attribute(a.name)) continue;
      put_attribute(s.varid, ov.name, a);
    }
    if (is_float && significant_digits > 0) {
      // Granular BitRound keeps NSD significant decimal digits (netCDF-C
      // 4.9 nc_def_var_quantize); CF 1.12 8.4 metadata names the container.
      check(nc_def_var_quantize(ncid, s.varid, NC_QUANTIZE_GRANULARBR, significant_digits),
            ov.name, "setting quantization");
      check(nc_put_att_text(ncid, s.varid, "quantization", std::strlen(quantization_container),
                            quantization_container),
            ov.name, "writing attribute quantization");
      check(nc_put_att_int(ncid, s.varid, "quantization_nsd", NC_INT, 1, &significant_digits),
            ov.name, "writing attribute quantization_nsd");
      any_quantized = true;
    }
    vars.push_back(std::move(s));
  }
  if (any_quantized) {
    // CF 1.12 8.4: a scalar container variable without data that describes
    // the algorithm and the library that applied it.
    int qid = -1;
    check(nc_def_var(ncid, quantization_container, NC_INT, 0, nullptr, &qid),
          quantization_container, "defining variable");
    const std::string algorithm = "granular_bitround";
    std::string version = nc_inq_libvers();
    version = version.substr(0, version.find(' '));
    const std::string implementation = "libnetcdf version " + version;
    check(nc_put_att_text(ncid, qid, "algorithm", algorithm.size(), algorithm.c_str()),
          quantization_container, "writing attribute algorithm");
    check(nc_put_att_text(ncid, qid, "implementation", implementation.size(),
                          implementation.c_str()),
          quantization_container, "writing attribute implementation");
  }
}

const VarSlot& Writer::Impl::slot(std::size_t var, OutputType want, std::size_t t,
                                  std::size_t j0, std::size_t nrows) const {
  if (!open)
    fail("", committed ? "already committed"
             : closed  ? "already closed"
                       : "file is closed after an error");
  if (var >= vars.size())
    fail("", "no output variable with index " + std::to_string(var));
  const VarSlot& s = vars[var];
  if (s.type != want)
    fail(s.name, want == OutputType::float32 ? "is a flag variable, not float"
                                             : "is a float variable, not a flag variable");
  if (t >= nt)
    fail(s.name, "time step " + std::to_string(t) + " outside 0.." + std::to_string(nt - 1));
  if (j0 > ny || nrows > ny - j0)
    fail(s.name, "rows " + std::to_string(j0) + "+" + std::to_string(nrows) + " outside 0.." +
                     std::to_string(ny - 1));
  return s;
}

void Writer::Impl::check_rows(std::size_t var, std::size_t t, std::size_t j0,
                              std::size_t nrows) const {
  if (var >= vars.size())
    fail("", "no output variable with index " + std::to_string(var));
  const VarSlot& s = vars[var];
  if (t >= nt)
    fail(s.name, "time step " + std::to_string(t) + " outside 0.." + std::to_string(nt - 1));
  if (j0 > ny || nrows > ny - j0)
    fail(s.name, "rows " + std::to_string(j0) + "+" + std::to_string(nrows) + " outside 0.." +
                     std::to_string(ny - 1));
}

// ---- direct path ---------------------------------------------------------------------

std::string Writer::Impl::start_direct() {
  // netCDF-C has defined everything and written the coordinates; close it
  // so that its copy of the metadata is gone before HDF5 changes the file
  // (CHUNK_IO.md pitfall 6).
  const int status = nc_close(ncid);
  nc_open_ = false;
  if (status != NC_NOERR) {
    open = false;
    fail("", std::string(nc_strerror(status)) + " (closing the defined file)");
  }
  std::string why;
  try {
    h5 = std::make_unique<chunkio::H5File>(tmp_path, true);
    const std::size_t rank = has_time ? 3 : 2;
    for (std::size_t v = 0; v < vars.size() && why.empty(); ++v) {
      h5vars.emplace_back(*h5, vars[v].name);
      chunkio::ChunkFormat f = h5vars.back().format();
      const auto want = vars[v].type == OutputType::float32 ? chunkio::ElementType::f32
                                                            : chunkio::ElementType::i8;
      // The chunk shape is read from the file, never assumed (pitfall 3).
      if (!h5vars.back().supported(&why)) break;
      if (f.dims.size() != rank || f.type != want || f.chunk[rank - 2] != chunk_rows ||
          (has_time && f.chunk[0] != 1) || f.dims[rank - 2] != ny || f.dims[rank - 1] != nx) {
        why = "variable " + vars[v].name + ": unexpected layout in the file";
        break;
      }
      // The unlimited dimension gets its final length before any chunk is
      // written (pitfall 1); the time coordinate already has nt values (pitfall 2).
      if (has_time && f.dims[0] != nt) {
        std::vector<std::size_t> dims = f.dims;
        dims[0] = nt;
        h5vars.back().set_extent(dims);
        f = h5vars.back().format();
      }
      formats.push_back(f);
    }
  } catch (const std::exception& e) {
    why = e.what();
  }
  if (why.empty()) {
    direct = true;
    writeback_fd = ::open(tmp_path.c_str(), O_RDONLY | O_CLOEXEC);
    return why;
  }
  // Fall back to netCDF-C for the whole file.
  h5vars.clear();
  h5.reset();
  formats.clear();
  const int again = nc_open(tmp_path.c_str(), NC_WRITE, &ncid);
  if (again != NC_NOERR) {
    open = false;
    fail("", std::string(nc_strerror(again)) + " (reopening the defined file)");
  }
  nc_open_ = true;
  return why;
}

void Writer::Impl::to_hdf5() {
  if (!nc_open_) return;
  const int status = nc_close(ncid);
  nc_open_ = false;
  if (status != NC_NOERR) {
    open = false;
    fail("", std::string(nc_strerror(status)) + " (closing for direct chunk writes)");
  }
  try {
    h5 = std::make_unique<chunkio::H5File>(tmp_path, true);
    for (const VarSlot& v : vars) h5vars.emplace_back(*h5, v.name);
  } catch (const std::exception& e) {
    h5vars.clear();
    h5.reset();
    open = false;
    fail("", e.what());
  }
}

void Writer::Impl::to_netcdf() {
  if (nc_open_) return;
  h5vars.clear();
  try {
    if (h5) h5->close();
  } catch (const std::exception& e) {
    h5.reset();
    open = false;
    fail("", e.what());
  }
  h5.reset();
  const int status = nc_open(tmp_path.c_str(), NC_WRITE, &ncid);
  if (status != NC_NOERR) {
    open = false;
    fail("", std::string(nc_strerror(status)) + " (reopening after direct chunk writes)");
  }
  nc_open_ = true;
}

void Writer::Impl::encode(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
                          const unsigned char* values, EncodedRows& out) const {
  out.var = var;
  out.t = t;
  out.j0 = j0;
  out.nrows = nrows;
  const std::size_t es = elem_size(var);
  // Buffers of a reused EncodedRows keep their capacity (no fresh memory).
  if (!direct) {
    out.chunks.clear();
    out.values.assign(values, values + nrows * nx * es);
    return;
  }
  out.values.clear();
  const chunkio::ChunkFormat& f = formats[var];
  const std::size_t rank = f.chunk.size();
  const std::size_t cr = f.chunk[rank - 2], cc = f.chunk[rank - 1], ncol = f.chunks_along(rank - 1);
  if (j0 % cr != 0 || ((j0 + nrows) % cr != 0 && j0 + nrows != ny))
    fail(vars[var].name, "rows " + std::to_string(j0) + "+" + std::to_string(nrows) +
                             " are not whole chunk rows of " + std::to_string(cr));
  thread_local std::vector<unsigned char> buf;
  const std::size_t nchunk_rows = (nrows + cr - 1) / cr, elements = f.chunk_elements();
  out.chunks.resize(nchunk_rows * ncol);
  for (std::size_t c = 0; c < nchunk_rows; ++c) {
    const std::size_t rows = std::min(cr, nrows - c * cr);
    for (std::size_t k = 0; k < ncol; ++k) {
      const std::size_t i0 = k * cc, n = std::min(cc, nx - i0);
      const unsigned char* chunk = values + c * cr * nx * es;
      if (rows < cr || n < cc || ncol > 1) {
        // Pack the chunk; edge chunks are stored full size, the outside
        // padded with the fill value (pitfall 3; HDF5 does the same).
        // (A full-width interior chunk is the rows themselves: no copy.)
        chunkio::resize_huge(buf, f.chunk_bytes());
        if (rows < cr || n < cc)
          for (std::size_t e = 0; e < elements; ++e) std::memcpy(buf.data() + e * es, f.fill.data(), es);
        for (std::size_t r = 0; r < rows; ++r)
          std::memcpy(buf.data() + r * cc * es, values + ((c * cr + r) * nx + i0) * es, n * es);
        chunk = buf.data();
      }
      try {
        chunkio::encode_chunk(f, codec, chunk, out.chunks[c * ncol + k]);
      } catch (const std::exception& e) {
        fail(vars[var].name, e.what());
      }
    }
  }
}

void Writer::Impl::store(const EncodedRows& rows) {
  const VarSlot& s = vars[rows.var];
  const std::string what = "rows " + std::to_string(rows.j0) + "+" + std::to_string(rows.nrows) +
                           " of time step " + std::to_string(rows.t);
  if (rows.nrows == 0) return;
  if (!direct) {
    const std::size_t start[3] = {rows.t, rows.j0, 0}, count[3] = {1, rows.nrows, nx};
    const int off = has_time ? 0 : 1;
    if (rows.values.size() != rows.nrows * nx * elem_size(rows.var))
      fail(s.name, "encoded " + what + " have the wrong size");
    const int status =
        s.type == OutputType::float32
            ? nc_put_vara_float(ncid, s.varid, start + off, count + off,
                                reinterpret_cast<const float*>(rows.values.data()))
            : nc_put_vara_schar(ncid, s.varid, start + off, count + off,
                                reinterpret_cast<const signed char*>(rows.values.data()));
    check(status, s.name, "writing " + what);
    return;
  }
  to_hdf5();
  const chunkio::ChunkFormat& f = formats[rows.var];
  const std::size_t rank = f.chunk.size();
  const std::size_t cr = f.chunk[rank - 2], cc = f.chunk[rank - 1], ncol = f.chunks_along(rank - 1);
  if (rows.chunks.size() != ((rows.nrows + cr - 1) / cr) * ncol)
    fail(s.name, "encoded " + what + " have the wrong number of chunks");
  std::vector<std::size_t> offset(rank, 0);
  if (has_time) offset[0] = rows.t;
  for (std::size_t idx = 0; idx < rows.chunks.size(); ++idx) {
    const std::size_t c = rows.j0 / cr + idx / ncol;
    offset[rank - 2] = c * cr;
    offset[rank - 1] = (idx % ncol) * cc;
    try {
      h5vars[rows.var].write_chunk(offset, rows.chunks[idx].data(), rows.chunks[idx].size());
    } catch (const std::exception& e) {
      fail("", std::string(e.what()) + " (writing " + what + ")");  // e names the variable
    }
    stored.insert({rows.var, rows.t, c});
    unsynced += rows.chunks[idx].size();
  }
  if (unsynced >= (std::size_t{8} << 20)) start_writeback();
}

Stage& Writer::Impl::stage_for(const StageKey& key) {
  auto it = stages.find(key);
  if (it != stages.end()) return it->second;
  const std::size_t var = key[0], c = key[2], es = elem_size(var), rows = rows_in(c);
  const chunkio::ChunkFormat& f = formats[var];
  Stage st;
  st.values.resize(rows * nx * es);
  for (std::size_t e = 0; e < rows * nx; ++e) std::memcpy(st.values.data() + e * es, f.fill.data(), es);
  st.filled.assign(rows, 0);
  st.missing = rows;
  if (stored.count(key) > 0) {
    // Rows of a chunk row already in the file: read it back, so that the
    // rewrite keeps the rows not given again (rare; the old chunk's space is
    // not reused by HDF5).
    to_hdf5();
    const std::size_t rank = f.chunk.size();
    const std::size_t cr = f.chunk[rank - 2], cc = f.chunk[rank - 1], ncol = f.chunks_along(rank - 1);
    std::vector<std::size_t> offset(rank, 0);
    if (has_time) offset[0] = key[1];
    offset[rank - 2] = c * cr;
    std::vector<unsigned char> bytes, chunk(f.chunk_bytes());
    for (std::size_t k = 0; k < ncol; ++k) {
      offset[rank - 1] = k * cc;
      unsigned mask = 0;
      try {
        if (!h5vars[var].read_chunk(offset, bytes, mask)) continue;
        chunkio::decode_chunk(f, bytes.data(), bytes.size(), mask, chunk.data());
      } catch (const std::exception& e) {
        fail(vars[var].name, std::string(e.what()) + " (reading back a chunk to rewrite it)");
      }
      const std::size_t i0 = k * cc, n = std::min(cc, nx - i0);
      for (std::size_t r = 0; r < rows; ++r)
        std::memcpy(st.values.data() + (r * nx + i0) * es, chunk.data() + r * cc * es, n * es);
    }
    std::fill(st.filled.begin(), st.filled.end(), 1);
    st.missing = 0;
  }
  return stages.emplace(key, std::move(st)).first->second;
}

void Writer::Impl::stage_rows(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
                              const unsigned char* values) {
  const std::size_t es = elem_size(var);
  std::size_t queued_bytes = 0;
  for (std::size_t j = j0; j < j0 + nrows; ++j) {
    const StageKey key{var, t, j / chunk_rows};
    Stage& st = stage_for(key);
    const std::size_t r = j % chunk_rows;
    std::memcpy(st.values.data() + r * nx * es, values + (j - j0) * nx * es, nx * es);
    if (!st.filled[r]) {
      st.filled[r] = 1;
      --st.missing;
    }
    if (st.missing == 0 && !st.queued) {
      st.queued = true;
      complete.push_back(key);
    }
  }
  for (const StageKey& k : complete) queued_bytes += stages.at(k).values.size();
  const auto threads = static_cast<std::size_t>(std::max(1, omp_get_max_threads()));
  if (queued_bytes >= flush_bytes || complete.size() >= 4 * threads) flush(false);
}

void Writer::Impl::flush(bool partial) {
  std::vector<StageKey> keys = complete;
  if (partial)
    for (const auto& [key, st] : stages)
      if (!st.queued) keys.push_back(key);
  if (keys.empty()) return;
  // Pack, shuffle and compress on every thread; no library call in here.
  std::vector<EncodedRows> encoded(keys.size());
  std::exception_ptr error;
  const auto n = static_cast<long>(keys.size());
#pragma omp parallel for schedule(dynamic, 1) if (n > 1)
  for (long k = 0; k < n; ++k) {
    try {
      const StageKey& key = keys[static_cast<std::size_t>(k)];
      encode(key[0], key[1], key[2] * chunk_rows, rows_in(key[2]), stages.at(key).values.data(),
             encoded[static_cast<std::size_t>(k)]);
    } catch (...) {
#pragma omp critical(seatilt_writer_error)
      if (!error) error = std::current_exception();
    }
  }
  if (error) std::rethrow_exception(error);
  // Store in a fixed order on this thread.
  for (std::size_t k = 0; k < keys.size(); ++k) {
    store(encoded[k]);
    stages.erase(keys[k]);
  }
  complete.clear();
}

Writer::Writer(const std::string& path, const HeightInfo& layout,
               std::vector<OutputVariable> variables, const WriterSettings& settings) {
  if (settings.deflate < 0 || settings.deflate > 9)
    throw UsageError("deflate level " + std::to_string(settings.deflate) +
                     " out of range 0..9");
  if (settings.significant_digits < 0 || settings.significant_digits > NC_QUANTIZE_MAX_FLOAT_NSD)
    throw UsageError("significant digits " + std::to_string(settings.significant_digits) +
                     " out of range 0.." + std::to_string(NC_QUANTIZE_MAX_FLOAT_NSD) +
                     " (0 = off)");

  impl_ = std::make_unique<Impl>();
  Impl& w = *impl_;
  w.path = path;
  w.force = settings.force;
  w.has_time = layout.time.has_value();
  w.ny = layout.lat.values.size();
  w.nx = layout.lon.values.size();
  w.nt = w.has_time ? layout.time->values.size() : 1;
  // A netCDF dimension of length 0 would be unlimited; an empty grid is a caller bug.
  if (w.ny == 0 || w.nx == 0) w.fail("", "empty latitude or longitude coordinate");
  if ((layout.ny != 0 && layout.ny != w.ny) || (layout.nx != 0 && layout.nx != w.nx))
    w.fail("", "layout ny x nx does not match the coordinate lengths");
  // chunk_rows = clamp(ceil(262144 / nx), 1, ny): ~1 MiB float32 chunks.
  w.chunk_rows = std::clamp<std::size_t>((target_chunk_elements + w.nx - 1) / w.nx, 1, w.ny);

  w.check_folder_and_target();
  w.create_temporary();

  int old_fill = 0;
  w.check(nc_set_fill(w.ncid, NC_FILL, &old_fill), "", "setting fill mode");

  auto dim_name = [](const CoordVar& c) { return c.dim.empty() ? c.name : c.dim; };
  int dimids[3] = {-1, -1, -1};
  int ndims = 0;
  if (w.has_time) {
    w.check(nc_def_dim(w.ncid, dim_name(*layout.time).c_str(), NC_UNLIMITED, &dimids[ndims++]),
            layout.time->name, "defining dimension");
  }
  w.check(nc_def_dim(w.ncid, dim_name(layout.lat).c_str(), w.ny, &dimids[ndims++]),
          layout.lat.name, "defining dimension");
  w.check(nc_def_dim(w.ncid, dim_name(layout.lon).c_str(), w.nx, &dimids[ndims++]),
          layout.lon.name, "defining dimension");

  const int time_id = w.has_time ? w.define_coordinate(*layout.time, dimids[0]) : -1;
  // A dimension without a coordinate variable (curvilinear grids) has name "".
  const int lat_id =
      layout.lat.name.empty() ? -1 : w.define_coordinate(layout.lat, dimids[ndims - 2]);
  const int lon_id =
      layout.lon.name.empty() ? -1 : w.define_coordinate(layout.lon, dimids[ndims - 1]);
  // Projected and curvilinear grids (docs/projected.md): the grid mapping
  // variable (scalar NC_INT with its attributes, CF 5.6) and the 2-D
  // auxiliary latitude/longitude (NC_DOUBLE on the grid dimensions, CF 5.2).
  int mapping_id = -1;
  if (layout.grid_mapping_var) {
    const AuxVar& g = *layout.grid_mapping_var;
    w.check(nc_def_var(w.ncid, g.name.c_str(), NC_INT, 0, nullptr, &mapping_id), g.name,
            "defining the grid mapping variable");
    for (const Attribute& a : g.attrs)
      if (!reserved_attribute(a.name) && !packing_attribute(a.name))
        w.put_attribute(mapping_id, g.name, a);
  }
  const auto define_aux = [&](const std::optional<AuxVar>& aux) {
    if (!aux) return -1;
    if (aux->values.size() != w.ny * w.nx)
      w.fail(aux->name, "2-D coordinate does not match the grid");
    int id = -1;
    w.check(nc_def_var(w.ncid, aux->name.c_str(), NC_DOUBLE, 2, dimids + ndims - 2, &id), aux->name,
            "defining auxiliary coordinate");
    for (const Attribute& a : aux->attrs)
      if (!reserved_attribute(a.name) && !packing_attribute(a.name))
        w.put_attribute(id, aux->name, a);
    return id;
  };
  const int lat2d_id = define_aux(layout.lat2d);
  const int lon2d_id = define_aux(layout.lon2d);

  w.define_variables(variables, dimids, ndims, settings.significant_digits, settings.deflate);

  for (const Attribute& a : settings.global_attrs) {
    if (reserved_attribute(a.name)) continue;
    w.put_attribute(NC_GLOBAL, "", a);
  }
  w.check(nc_enddef(w.ncid), "", "ending define mode");

  auto put_coordinate = [&w](int varid, const CoordVar& c) {
    const std::size_t start = 0, count = c.values.size();
    if (count > 0)
      w.check(nc_put_vara_double(w.ncid, varid, &start, &count, c.values.data()), c.name,
              "writing coordinate values");
  };
  if (w.has_time) put_coordinate(time_id, *layout.time);
  if (lat_id >= 0) put_coordinate(lat_id, layout.lat);
  if (lon_id >= 0) put_coordinate(lon_id, layout.lon);
  if (lat2d_id >= 0)
    w.check(nc_put_var_double(w.ncid, lat2d_id, layout.lat2d->values.data()), layout.lat2d->name,
            "writing auxiliary coordinate values");
  if (lon2d_id >= 0)
    w.check(nc_put_var_double(w.ncid, lon2d_id, layout.lon2d->values.data()), layout.lon2d->name,
            "writing auxiliary coordinate values");

  w.codec = settings.codec;
  if (settings.chunk_writes == ChunkWrites::netcdf) {
    w.write_path = "netCDF-C (direct chunk writes switched off)";
  } else if (settings.significant_digits > 0) {
    w.write_path = "netCDF-C (significant digits: netCDF-C quantises)";
  } else {
    const std::string why = w.start_direct();
    w.write_path = why.empty() ? std::string("direct chunk writes (") +
                                     (w.codec == chunkio::Codec::zlib ? "zlib" : "libdeflate") + ")"
                               : "netCDF-C (" + why + ")";
  }
}

Writer::~Writer() = default;
Writer::Writer(Writer&&) noexcept = default;
Writer& Writer::operator=(Writer&&) noexcept = default;

std::size_t Writer::chunk_rows() const { return impl_ ? impl_->chunk_rows : 1; }

const std::string& Writer::path() const {
  static const std::string none;
  return impl_ ? impl_->path : none;
}

void Writer::write_rows(std::size_t var, std::size_t t, std::size_t j0, const Field& rows) {
  if (!impl_) throw OutputError("writer was moved from");
  Impl& w = *impl_;
  const VarSlot& s = w.slot(var, OutputType::float32, t, j0, rows.ny);
  if (rows.nx != w.nx || rows.data.size() != rows.ny * rows.nx)
    w.fail(s.name, "row band has " + std::to_string(rows.nx) + " columns, grid has " +
                       std::to_string(w.nx));
  if (rows.ny == 0) return;
  // Non-finite values and values beyond the float range become _FillValue
  // (checked before the cast: converting an out-of-range double is undefined).
  w.fbuf.resize(rows.data.size());
  for (std::size_t k = 0; k < rows.data.size(); ++k) w.fbuf[k] = output_float(rows.data[k]);
  if (w.direct) {
    w.stage_rows(var, t, j0, rows.ny, reinterpret_cast<const unsigned char*>(w.fbuf.data()));
    return;
  }
  const std::size_t start[3] = {t, j0, 0}, count[3] = {1, rows.ny, w.nx};
  const int off = w.has_time ? 0 : 1;
  w.check(nc_put_vara_float(w.ncid, s.varid, start + off, count + off, w.fbuf.data()), s.name,
          "writing rows " + std::to_string(j0) + "+" + std::to_string(rows.ny) + " of time step " +
              std::to_string(t));
}

void Writer::write_flags(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
                         const std::uint8_t* flags) {
  if (!impl_) throw OutputError("writer was moved from");
  Impl& w = *impl_;
  const VarSlot& s = w.slot(var, OutputType::flag8, t, j0, nrows);
  if (nrows == 0) return;
  if (flags == nullptr) w.fail(s.name, "no flag data");
  // Stored bit for bit: NC_BYTE is signed, so 128..255 read back as -128..-1.
  if (w.direct) {
    w.stage_rows(var, t, j0, nrows, flags);
    return;
  }
  const std::size_t start[3] = {t, j0, 0}, count[3] = {1, nrows, w.nx};
  const int off = w.has_time ? 0 : 1;
  w.check(nc_put_vara_schar(w.ncid, s.varid, start + off, count + off,
                            reinterpret_cast<const signed char*>(flags)),
          s.name,
          "writing flag rows " + std::to_string(j0) + "+" + std::to_string(nrows) +
              " of time step " + std::to_string(t));
}

void Writer::encode_rows(std::size_t var, std::size_t t, std::size_t j0, std::size_t nrows,
                         const void* values, EncodedRows& out) const {
  if (!impl_) throw OutputError("writer was moved from");
  const Impl& w = *impl_;
  w.check_rows(var, t, j0, nrows);
  if (nrows > 0 && values == nullptr) w.fail(w.vars[var].name, "no data");
  w.encode(var, t, j0, nrows, static_cast<const unsigned char*>(values), out);
}

void Writer::store(const EncodedRows& rows) {
  if (!impl_) throw OutputError("writer was moved from");
  Impl& w = *impl_;
  if (!w.open)
    w.fail("", w.committed ? "already committed"
               : w.closed  ? "already closed"
                           : "file is closed after an error");
  w.check_rows(rows.var, rows.t, rows.j0, rows.nrows);
  w.store(rows);
}

const std::string& Writer::write_path() const {
  static const std::string none;
  return impl_ ? impl_->write_path : none;
}

void Writer::set_global_text(const std::string& name, const std::string& value) {
  if (!impl_) throw OutputError("writer was moved from");
  Impl& w = *impl_;
  if (!w.open)
    w.fail("", w.committed ? "already committed"
               : w.closed  ? "already closed"
                           : "file is closed after an error");
  if (name.empty() || reserved_attribute(name)) w.fail("", "global attribute name '" + name + "' not allowed");
  if (w.direct) {
    w.flush(false);
    w.start_writeback();
    w.to_netcdf();
  }
  // netCDF-4 (not classic model) re-enters define mode by itself for attributes.
  w.check(nc_put_att_text(w.ncid, NC_GLOBAL, name.c_str(), value.size(), value.c_str()), "",
          "writing global attribute " + name);
}

void Writer::commit() {
  close();
  publish();
}

void Writer::close() {
  if (!impl_) throw OutputError("writer was moved from");
  Impl& w = *impl_;
  if (w.committed) w.fail("", "already committed");
  if (w.closed) w.fail("", "already closed");
  if (!w.open) w.fail("", "file is closed after an error");
  if (w.direct) {
    try {
      w.flush(true);  // the rest of partly written chunk rows reads back as fill
    } catch (...) {
      w.discard();
      throw;
    }
    w.start_writeback();
    if (w.writeback_fd >= 0) {
      ::close(w.writeback_fd);
      w.writeback_fd = -1;
    }
  }
  w.open = false;
  if (!w.nc_open_) {
    w.h5vars.clear();
    try {
      w.h5->close();
    } catch (const std::exception& e) {
      w.h5.reset();
      w.discard();
      w.fail("", std::string(e.what()) + " (closing)");
    }
    w.h5.reset();
  } else {
    const int status = nc_close(w.ncid);
    if (status != NC_NOERR) {
      w.nc_open_ = false;
      w.discard();
      w.fail("", std::string(nc_strerror(status)) + " (closing)");
    }
  }
  w.nc_open_ = false;
  w.closed = true;
}

void Writer::publish() {
  if (!impl_) throw OutputError("writer was moved from");
  Impl& w = *impl_;
  if (w.committed) w.fail("", "already committed");
  if (!w.closed) w.fail("", "publish before close");
  if (const int err = sync_path(w.tmp_path, false); err != 0) {
    w.discard();
    w.fail("", "flushing to disk: " + errno_text(err));
  }
  const int err = w.force ? (std::rename(w.tmp_path.c_str(), w.path.c_str()) == 0 ? 0 : errno)
                          : rename_noreplace(w.tmp_path, w.path);
  if (err != 0) {
    w.discard();
    w.fail("", err == EEXIST ? std::string("output exists (use --force to overwrite)")
                             : "renaming " + w.tmp_path + ": " + errno_text(err));
  }
  w.tmp_exists = false;
  w.closed = false;
  w.committed = true;
  // Make the rename itself durable; a failure here leaves a complete file.
  sync_path(split_path(w.path).first, true);
}

}  // namespace seatilt
