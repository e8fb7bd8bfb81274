// Tests for seatilt/chunkio.hpp and the raw chunk paths of Reader and Writer.
//
// Reference: netCDF-C 4.9.0 and HDF5 1.10.8 themselves (Debian 12): files are
// written through netCDF-C and read back through netCDF-C, ncdump and
// python3-netCDF4/xarray; chunk bytes are compared with the ones HDF5's own
// filters stored. Each pitfall of ../shared/CHUNK_IO.md has a case here
// (numbers in the test names).
#include <doctest/doctest.h>
#include <netcdf.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <memory>
#include <string>
#include <vector>

#include "seatilt/chunkio.hpp"
#include "seatilt/error.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/writer.hpp"

using namespace seatilt;
using namespace seatilt::chunkio;
namespace fs = std::filesystem;

namespace {

void nc_ok(int status) { REQUIRE_MESSAGE(status == NC_NOERR, nc_strerror(status)); }

struct TempDir {
  fs::path path;
  TempDir() {
    char tmpl[] = "/tmp/seatilt-test-chunkio-XXXXXX";
    path = ::mkdtemp(tmpl);
  }
  ~TempDir() { fs::remove_all(path); }
  [[nodiscard]] std::string file(const std::string& name) const { return (path / name).string(); }
};

/// Deterministic test value of cell (t, j, i), not smooth (like real outputs
/// the low mantissa bytes vary), exactly representable as float.
float value(std::size_t t, std::size_t j, std::size_t i) {
  return static_cast<float>(std::sin(0.37 * static_cast<double>(i) +
                                     0.11 * static_cast<double>(j * j) +
                                     1.3 * static_cast<double>(t)));
}

struct VarSpec {
  nc_type type = NC_FLOAT;
  bool with_time = true;
  bool unlimited = true;
  std::size_t nt = 2, ny = 12, nx = 17;
  std::vector<std::size_t> chunk = {1, 5, 7};  // empty = contiguous
  int deflate = 1;                             // -1 = no deflate filter
  bool shuffle = true;
  bool fletcher32 = false;
  int endian = NC_ENDIAN_NATIVE;
  bool fill_attr = true;
  std::vector<std::size_t> skip_time;  // time steps left unwritten
  int format = NC_NETCDF4;
};

/// Writes variable "h" (degrees lat/lon coordinates, a sea-surface-height
/// standard_name, metres) through netCDF-C with SPEC, values value(t,j,i)
/// (scaled for integer types). Returns the values written, as doubles.
std::vector<double> make_file(const std::string& path, const VarSpec& spec) {
  int nc = 0, dt = -1, dy = 0, dx = 0, vy = 0, vx = 0, vt = 0, vh = 0;
  nc_ok(nc_create(path.c_str(), spec.format | NC_CLOBBER, &nc));
  if (spec.with_time) nc_ok(nc_def_dim(nc, "time", spec.unlimited ? NC_UNLIMITED : spec.nt, &dt));
  nc_ok(nc_def_dim(nc, "lat", spec.ny, &dy));
  nc_ok(nc_def_dim(nc, "lon", spec.nx, &dx));
  if (spec.with_time) {
    nc_ok(nc_def_var(nc, "time", NC_DOUBLE, 1, &dt, &vt));
    nc_ok(nc_put_att_text(nc, vt, "units", 22, "days since 2000-01-01"));
  }
  nc_ok(nc_def_var(nc, "lat", NC_DOUBLE, 1, &dy, &vy));
  nc_ok(nc_put_att_text(nc, vy, "units", 13, "degrees_north"));
  nc_ok(nc_def_var(nc, "lon", NC_DOUBLE, 1, &dx, &vx));
  nc_ok(nc_put_att_text(nc, vx, "units", 12, "degrees_east"));
  const int dims[3] = {dt, dy, dx};
  const int nd = spec.with_time ? 3 : 2;
  nc_ok(nc_def_var(nc, "h", spec.type, nd, spec.with_time ? dims : dims + 1, &vh));
  const std::string sn = "sea_surface_height_above_geoid";
  nc_ok(nc_put_att_text(nc, vh, "standard_name", sn.size(), sn.c_str()));
  nc_ok(nc_put_att_text(nc, vh, "units", 1, "m"));
  const bool is_int = spec.type != NC_FLOAT && spec.type != NC_DOUBLE;
  if (is_int) {
    const double sf = 0.01;
    nc_ok(nc_put_att_double(nc, vh, "scale_factor", NC_DOUBLE, 1, &sf));
  }
  if (spec.fill_attr) {
    const double fill = is_int ? -99.0 : -999.0;
    nc_ok(nc_put_att_double(nc, vh, "_FillValue", spec.type, 1, &fill));
  }
  if (spec.format == NC_NETCDF4) {
    if (spec.chunk.empty()) {
      nc_ok(nc_def_var_chunking(nc, vh, NC_CONTIGUOUS, nullptr));
    } else {
      nc_ok(nc_def_var_chunking(nc, vh, NC_CHUNKED,
                                spec.with_time ? spec.chunk.data() : spec.chunk.data() + 1));
      if (spec.deflate >= 0 || spec.shuffle)
        nc_ok(nc_def_var_deflate(nc, vh, spec.shuffle ? 1 : 0, spec.deflate >= 0 ? 1 : 0,
                                 std::max(spec.deflate, 0)));
      if (spec.fletcher32) nc_ok(nc_def_var_fletcher32(nc, vh, NC_FLETCHER32));
    }
    if (spec.endian != NC_ENDIAN_NATIVE) nc_ok(nc_def_var_endian(nc, vh, spec.endian));
  }
  nc_ok(nc_enddef(nc));
  std::vector<double> lat(spec.ny), lon(spec.nx), time(spec.nt);
  for (std::size_t j = 0; j < spec.ny; ++j) lat[j] = 10.0 + 0.5 * static_cast<double>(j);
  for (std::size_t i = 0; i < spec.nx; ++i) lon[i] = 100.0 + 0.5 * static_cast<double>(i);
  for (std::size_t t = 0; t < spec.nt; ++t) time[t] = static_cast<double>(t);
  nc_ok(nc_put_var_double(nc, vy, lat.data()));
  nc_ok(nc_put_var_double(nc, vx, lon.data()));
  if (spec.with_time) {
    const std::size_t start = 0, count = spec.nt;
    nc_ok(nc_put_vara_double(nc, vt, &start, &count, time.data()));
  }
  const std::size_t nt = spec.with_time ? spec.nt : 1;
  std::vector<double> all(nt * spec.ny * spec.nx, std::numeric_limits<double>::quiet_NaN());
  for (std::size_t t = 0; t < nt; ++t) {
    bool skip = false;
    for (std::size_t s : spec.skip_time) skip = skip || s == t;
    if (skip) continue;
    std::vector<double> step(spec.ny * spec.nx);
    for (std::size_t j = 0; j < spec.ny; ++j)
      for (std::size_t i = 0; i < spec.nx; ++i) {
        double v = value(t, j, i);
        if (is_int) v = std::round(v * 100.0);
        if ((i + 2 * j) % 11 == 0) v = is_int ? -99.0 : -999.0;  // scattered fill cells
        step[j * spec.nx + i] = v;
      }
    const std::size_t start[3] = {t, 0, 0}, count[3] = {1, spec.ny, spec.nx};
    const int off = spec.with_time ? 0 : 1;
    nc_ok(nc_put_vara_double(nc, vh, start + off, count + off, step.data()));
    std::copy(step.begin(), step.end(), all.begin() + static_cast<std::ptrdiff_t>(t * step.size()));
  }
  nc_ok(nc_close(nc));
  return all;
}

/// Rows of every step through Reader::read_rows with or without raw chunks.
std::vector<double> read_all(const std::string& path, bool raw, std::string* how = nullptr) {
  ReaderOptions o;
  o.raw_chunks = raw;
  Reader r(path, o);
  if (how != nullptr) *how = r.read_path();
  std::vector<double> out;
  Field f;
  for (std::size_t t = 0; t < r.info().nt; ++t) {
    r.read_rows(t, 0, r.info().ny, f);
    out.insert(out.end(), f.data.begin(), f.data.end());
  }
  return out;
}

bool same_bits(const std::vector<double>& a, const std::vector<double>& b) {
  return a.size() == b.size() && std::memcmp(a.data(), b.data(), a.size() * sizeof(double)) == 0;
}

/// Full chunk (machine order) at OFFSET of a float (t, y, x) array VALUES,
/// padded with FILL outside the extent.
std::vector<unsigned char> padded_chunk(const std::vector<float>& values,
                                        const std::vector<std::size_t>& dims,
                                        const std::vector<std::size_t>& chunk,
                                        const std::vector<std::size_t>& offset, float fill) {
  std::vector<float> c(chunk[0] * chunk[1] * chunk[2], fill);
  for (std::size_t a = 0; a < chunk[0]; ++a)
    for (std::size_t b = 0; b < chunk[1]; ++b)
      for (std::size_t d = 0; d < chunk[2]; ++d) {
        const std::size_t t = offset[0] + a, j = offset[1] + b, i = offset[2] + d;
        if (t < dims[0] && j < dims[1] && i < dims[2])
          c[(a * chunk[1] + b) * chunk[2] + d] = values[(t * dims[1] + j) * dims[2] + i];
      }
  std::vector<unsigned char> bytes(c.size() * sizeof(float));
  std::memcpy(bytes.data(), c.data(), bytes.size());
  return bytes;
}

std::string run(const std::string& command) {
  std::string out;
  std::unique_ptr<FILE, int (*)(FILE*)> p(::popen(command.c_str(), "r"), &::pclose);
  REQUIRE(p != nullptr);
  char buf[4096];
  while (std::fgets(buf, sizeof buf, p.get()) != nullptr) out += buf;
  return out;
}

}  // namespace

// ---- filters --------------------------------------------------------------------

TEST_CASE("shuffle follows the HDF5 byte layout") {
  // HDF5 H5Zshuffle.c: byte k of element e goes to position k * n + e.
  const std::vector<unsigned char> in = {0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11};
  std::vector<unsigned char> out(12), back(12);
  shuffle_bytes(in.data(), out.data(), 3, 4);
  CHECK(out == std::vector<unsigned char>{0, 4, 8, 1, 5, 9, 2, 6, 10, 3, 7, 11});
  unshuffle_bytes(out.data(), back.data(), 3, 4);
  CHECK(back == in);
  shuffle_bytes(in.data(), out.data(), 6, 2);
  CHECK(out == std::vector<unsigned char>{0, 2, 4, 6, 8, 10, 1, 3, 5, 7, 9, 11});
  unshuffle_bytes(out.data(), back.data(), 6, 2);
  CHECK(back == in);
  shuffle_bytes(in.data(), out.data(), 12, 1);
  CHECK(out == in);
  std::vector<unsigned char> s = in;
  swap_bytes(s.data(), 3, 4);
  CHECK(s == std::vector<unsigned char>{3, 2, 1, 0, 7, 6, 5, 4, 11, 10, 9, 8});
}

TEST_CASE(
    "pitfall 3: chunks built for the shape read from the file, edge chunks padded; zlib chunks "
    "equal HDF5's") {
  TempDir tmp;
  const std::string path = tmp.file("plain.nc");
  VarSpec spec;  // (2, 12, 17) in chunks (1, 5, 7): edge chunks in both dimensions
  make_file(path, spec);
  std::vector<float> values(2 * 12 * 17);
  {
    int nc = 0, v = 0;
    nc_ok(nc_open(path.c_str(), NC_NOWRITE, &nc));
    nc_ok(nc_inq_varid(nc, "h", &v));
    nc_ok(nc_get_var_float(nc, v, values.data()));
    nc_ok(nc_close(nc));
  }
  H5File file(path, false);
  H5Chunked ds(file, "h");
  REQUIRE(ds.supported());
  const ChunkFormat& f = ds.format();
  CHECK(f.dims == std::vector<std::size_t>{2, 12, 17});
  CHECK(f.chunk == std::vector<std::size_t>{1, 5, 7});
  CHECK(f.type == ElementType::f32);
  CHECK(f.shuffle);
  CHECK(f.deflate);
  CHECK(f.level == 1);
  CHECK_FALSE(f.swap);
  float fill = 0;
  std::memcpy(&fill, f.fill.data(), sizeof fill);
  CHECK(fill == -999.0f);  // the _FillValue attribute is HDF5's fill value
  std::size_t chunks = 0;
  for (std::size_t t = 0; t < 2; ++t)
    for (std::size_t j = 0; j < 12; j += 5)
      for (std::size_t i = 0; i < 17; i += 7) {
        const std::vector<std::size_t> offset = {t, j, i};
        std::vector<unsigned char> stored;
        unsigned mask = 99;
        REQUIRE(ds.read_chunk(offset, stored, mask));
        CHECK(mask == 0);
        const auto want = padded_chunk(values, f.dims, f.chunk, offset, fill);
        // Decoding what HDF5 stored gives the padded chunk.
        std::vector<unsigned char> decoded(f.chunk_bytes());
        decode_chunk(f, stored.data(), stored.size(), mask, decoded.data());
        CHECK(decoded == want);
        // zlib (compress2) encodes exactly the bytes HDF5's deflate filter stored.
        auto work = want;
        std::vector<unsigned char> mine;
        encode_chunk(f, Codec::zlib, work.data(), mine);
        CHECK(mine == stored);
        // libdeflate: other bytes, same chunk after decoding.
        work = want;
        encode_chunk(f, Codec::libdeflate, work.data(), mine);
        decode_chunk(f, mine.data(), mine.size(), 0, decoded.data());
        CHECK(decoded == want);
        ++chunks;
      }
  CHECK(chunks == 2 * 3 * 3);
  // A corrupt chunk is an error, never a crash or a silent wrong value.
  std::vector<unsigned char> junk(40, 0x5a), out(f.chunk_bytes());
  CHECK_THROWS_AS(decode_chunk(f, junk.data(), junk.size(), 0, out.data()), std::runtime_error);
}

TEST_CASE("pitfall 4: byte order is swapped for big-endian variables, both ways") {
  TempDir tmp;
  VarSpec spec;
  spec.endian = NC_ENDIAN_BIG;
  const std::string path = tmp.file("big.nc");
  make_file(path, spec);
  std::string how;
  const auto raw = read_all(path, true, &how);
  CHECK(how == "raw chunks (shuffle+deflate, byte-swapped)");
  CHECK(same_bits(raw, read_all(path, false)));

  // Write big-endian chunks by hand into a copy, read them back through netCDF-C.
  const std::string copy = tmp.file("big2.nc");
  fs::copy_file(path, copy);
  std::vector<float> mine(2 * 12 * 17);
  for (std::size_t k = 0; k < mine.size(); ++k) mine[k] = 0.5f * static_cast<float>(k) - 3.25f;
  {
    H5File file(copy, true);
    H5Chunked ds(file, "h");
    REQUIRE(ds.supported());
    CHECK(ds.format().swap);
    const ChunkFormat f = ds.format();
    for (std::size_t t = 0; t < 2; ++t)
      for (std::size_t j = 0; j < 12; j += 5)
        for (std::size_t i = 0; i < 17; i += 7) {
          auto chunk = padded_chunk(mine, f.dims, f.chunk, {t, j, i}, -999.0f);
          std::vector<unsigned char> stored;
          encode_chunk(f, Codec::libdeflate, chunk.data(), stored);
          ds.write_chunk({t, j, i}, stored.data(), stored.size());
        }
    file.close();
  }
  int nc = 0, v = 0;
  nc_ok(nc_open(copy.c_str(), NC_NOWRITE, &nc));
  nc_ok(nc_inq_varid(nc, "h", &v));
  std::vector<float> back(mine.size());
  nc_ok(nc_get_var_float(nc, v, back.data()));
  nc_ok(nc_close(nc));
  CHECK(back == mine);
}

TEST_CASE("pitfall 1: the unlimited extent is set before chunks are written; offsets are checked") {
  TempDir tmp;
  const std::string path = tmp.file("grow.nc");
  {
    // netCDF-C defines (time unlimited, 0 records of h) and writes 3 times.
    int nc = 0, dt = 0, dy = 0, dx = 0, vt = 0, vh = 0;
    nc_ok(nc_create(path.c_str(), NC_NETCDF4 | NC_CLOBBER, &nc));
    nc_ok(nc_def_dim(nc, "time", NC_UNLIMITED, &dt));
    nc_ok(nc_def_dim(nc, "y", 4, &dy));
    nc_ok(nc_def_dim(nc, "x", 6, &dx));
    nc_ok(nc_def_var(nc, "time", NC_DOUBLE, 1, &dt, &vt));
    const int dims[3] = {dt, dy, dx};
    nc_ok(nc_def_var(nc, "h", NC_FLOAT, 3, dims, &vh));
    const std::size_t chunk[3] = {1, 4, 6};
    nc_ok(nc_def_var_chunking(nc, vh, NC_CHUNKED, chunk));
    nc_ok(nc_def_var_deflate(nc, vh, 1, 1, 1));
    nc_ok(nc_enddef(nc));
    const double times[3] = {0, 1, 2};
    const std::size_t start = 0, count = 3;
    nc_ok(nc_put_vara_double(nc, vt, &start, &count, times));
    nc_ok(nc_close(nc));
  }
  H5File file(path, true);
  H5Chunked ds(file, "h");
  REQUIRE(ds.supported());
  CHECK(ds.format().dims[0] == 0);
  std::vector<unsigned char> chunk(ds.format().chunk_bytes()), stored;
  std::vector<float> vals(24);
  for (std::size_t k = 0; k < 24; ++k) vals[k] = static_cast<float>(k);
  std::memcpy(chunk.data(), vals.data(), chunk.size());
  ChunkFormat f = ds.format();
  auto work = chunk;
  encode_chunk(f, Codec::libdeflate, work.data(), stored);
  // Extent 0: HDF5 would segfault (or hide the chunk); refused here.
  CHECK_THROWS_AS(ds.write_chunk({0, 0, 0}, stored.data(), stored.size()), std::runtime_error);
  ds.set_extent({3, 4, 6});
  CHECK_THROWS_AS(ds.write_chunk({3, 0, 0}, stored.data(), stored.size()), std::runtime_error);
  CHECK_THROWS_AS(ds.write_chunk({0, 1, 0}, stored.data(), stored.size()), std::runtime_error);
  for (std::size_t t = 0; t < 3; ++t) ds.write_chunk({t, 0, 0}, stored.data(), stored.size());
  file.close();
  int nc = 0, v = 0;
  std::size_t len = 0;
  int unlim = -1;
  nc_ok(nc_open(path.c_str(), NC_NOWRITE, &nc));
  nc_ok(nc_inq_unlimdim(nc, &unlim));
  nc_ok(nc_inq_dimlen(nc, unlim, &len));
  CHECK(len == 3);
  nc_ok(nc_inq_varid(nc, "h", &v));
  std::vector<float> back(72);
  nc_ok(nc_get_var_float(nc, v, back.data()));
  nc_ok(nc_close(nc));
  for (std::size_t k = 0; k < 72; ++k) CHECK(back[k] == vals[k % 24]);
}

// ---- raw reads ---------------------------------------------------------------------

TEST_CASE("raw chunk reads give exactly the values of nc_get_vara") {
  TempDir tmp;
  struct Case {
    const char* name;
    VarSpec spec;
    const char* how;
  };
  std::vector<Case> cases;
  {
    Case c{"float, shuffle+deflate", VarSpec{}, "raw chunks (shuffle+deflate)"};
    cases.push_back(c);
  }
  {
    Case c{"float, deflate only", VarSpec{}, "raw chunks (deflate)"};
    c.spec.shuffle = false;
    c.spec.deflate = 5;
    cases.push_back(c);
  }
  {
    Case c{"float, chunked, no filter", VarSpec{}, "raw chunks (no filter)"};
    c.spec.shuffle = false;
    c.spec.deflate = -1;
    cases.push_back(c);
  }
  {
    Case c{"packed int16, chunks spanning two steps", VarSpec{}, "raw chunks (shuffle+deflate)"};
    c.spec.type = NC_SHORT;
    c.spec.nt = 3;
    c.spec.chunk = {2, 4, 17};
    cases.push_back(c);
  }
  {
    Case c{"double, no time", VarSpec{}, "raw chunks (shuffle+deflate)"};
    c.spec.type = NC_DOUBLE;
    c.spec.with_time = false;
    c.spec.nt = 1;
    cases.push_back(c);
  }
  {
    Case c{"pitfall 5: unallocated chunks read as fill", VarSpec{}, "raw chunks (shuffle+deflate)"};
    c.spec.nt = 3;
    c.spec.skip_time = {1};
    cases.push_back(c);
  }
  {
    Case c{"fixed time dimension", VarSpec{}, "raw chunks (shuffle+deflate)"};
    c.spec.unlimited = false;
    cases.push_back(c);
  }
  {
    Case c{"contiguous: netCDF-C", VarSpec{}, "netCDF-C (not chunked)"};
    c.spec.chunk.clear();
    c.spec.unlimited = false;  // an unlimited dimension needs chunks
    c.spec.deflate = -1;
    c.spec.shuffle = false;
    cases.push_back(c);
  }
  {
    Case c{"fletcher32: netCDF-C", VarSpec{}, "netCDF-C (filter 3 (fletcher32) at position 0)"};
    c.spec.fletcher32 = true;
    cases.push_back(c);
  }
  {
    Case c{"netCDF-3: netCDF-C", VarSpec{}, "netCDF-C (64-bit offset file)"};
    c.spec.format = NC_64BIT_OFFSET;
    cases.push_back(c);
  }
  for (const Case& c : cases) {
    INFO(std::string(c.name));
    const std::string path = tmp.file("in.nc");
    make_file(path, c.spec);
    std::string how;
    const auto raw = read_all(path, true, &how);
    CHECK(how == c.how);
    const auto plain = read_all(path, false);
    CHECK(same_bits(raw, plain));
    std::size_t missing = 0;
    for (double v : raw) missing += std::isnan(v);
    CHECK(missing > 0);
    CHECK(missing < raw.size());
  }
}

TEST_CASE("overlapping fetches decode each chunk once, in fetch order, on other threads") {
  TempDir tmp;
  const std::string path = tmp.file("in.nc");
  VarSpec spec;
  spec.ny = 40;
  spec.chunk = {1, 10, 17};
  make_file(path, spec);
  Reader r(path, ReaderOptions{});
  FetchedRows a, b;
  r.fetch_rows(0, 0, 14, a);  // chunk rows 0 and 1
  r.fetch_rows(0, 8, 14, b);  // chunk rows 0..2: only row 2 is new
  CHECK(a.tasks() == 2);
  CHECK(b.tasks() == 1);
  for (std::size_t k = 0; k < a.tasks(); ++k) a.run_task(k);
  for (std::size_t k = 0; k < b.tasks(); ++k) b.run_task(k);
  Field fa(14, 17), fb(14, 17), want;
  r.unpack_rows(a, 0, 14, fa);
  r.unpack_rows(b, 0, 7, fb);
  r.unpack_rows(b, 7, 14, fb);
  ReaderOptions plain;
  plain.raw_chunks = false;
  Reader p(path, plain);
  p.read_rows(0, 0, 14, want);
  CHECK(std::memcmp(fa.data.data(), want.data.data(), want.data.size() * sizeof(double)) == 0);
  p.read_rows(0, 8, 14, want);
  CHECK(std::memcmp(fb.data.data(), want.data.data(), want.data.size() * sizeof(double)) == 0);
}

TEST_CASE("a corrupt input chunk is an InputError naming file and variable") {
  TempDir tmp;
  const std::string path = tmp.file("bad.nc");
  make_file(path, VarSpec{});
  {
    H5File file(path, true);
    H5Chunked ds(file, "h");
    const std::vector<unsigned char> junk(64, 0x33);
    ds.write_chunk({1, 5, 7}, junk.data(), junk.size());
    file.close();
  }
  Reader r(path, ReaderOptions{});
  Field f;
  try {
    r.read_rows(1, 0, 12, f);
    FAIL("no error");
  } catch (const InputError& e) {
    const std::string msg = e.what();
    CHECK(msg.find(path) == 0);
    CHECK(msg.find("variable h") != std::string::npos);
  }
}

// ---- direct chunk writes ---------------------------------------------------------------

namespace {

HeightInfo layout(std::size_t nt, std::size_t ny, std::size_t nx) {
  HeightInfo h;
  h.ny = ny;
  h.nx = nx;
  h.nt = nt;
  h.lat.name = h.lat.dim = "lat";
  h.lat.nc_type = NC_DOUBLE;
  for (std::size_t j = 0; j < ny; ++j)
    h.lat.values.push_back(-60.0 + 0.25 * static_cast<double>(j));
  h.lon.name = h.lon.dim = "lon";
  h.lon.nc_type = NC_DOUBLE;
  for (std::size_t i = 0; i < nx; ++i) h.lon.values.push_back(0.25 * static_cast<double>(i));
  Attribute units;
  units.name = "units";
  units.nc_type = NC_CHAR;
  units.text = "degrees_north";
  h.lat.attrs = {units};
  units.text = "degrees_east";
  h.lon.attrs = {units};
  if (nt > 0) {
    CoordVar t;
    t.name = t.dim = "time";
    t.nc_type = NC_DOUBLE;
    for (std::size_t k = 0; k < nt; ++k) t.values.push_back(static_cast<double>(k));
    units.text = "days since 2000-01-01";
    t.attrs = {units};
    h.time = t;
  }
  if (nt == 0) h.nt = 1;
  return h;
}

/// Writes the same rows through WriterSettings S: float "a" and "b" and
/// flags "q", in bands of BAND rows (written var by var, rows interleaved).
void write_file(const std::string& path, const HeightInfo& lay, WriterSettings s, std::size_t band,
                std::string* how = nullptr) {
  const std::vector<OutputVariable> vars = {
      {"a", OutputType::float32, {}}, {"b", OutputType::float32, {}}, {"q", OutputType::flag8, {}}};
  Writer w(path, lay, vars, s);
  if (how != nullptr) *how = w.write_path();
  const std::size_t ny = lay.ny, nx = lay.nx;
  for (std::size_t t = 0; t < lay.nt; ++t)
    for (std::size_t j0 = 0; j0 < ny; j0 += band) {
      const std::size_t n = std::min(band, ny - j0);
      Field f(n, nx);
      std::vector<std::uint8_t> q(n * nx);
      for (std::size_t j = 0; j < n; ++j)
        for (std::size_t i = 0; i < nx; ++i) {
          f.at(j, i) = (i + j0 + j) % 13 == 0 ? std::numeric_limits<double>::quiet_NaN()
                                              : 0.1 * value(t, j0 + j, i);
          q[j * nx + i] = static_cast<std::uint8_t>((i * 7 + j0 + j + t) % 256);
        }
      w.write_rows(0, t, j0, f);
      for (double& v : f.data) v = -v * 1e-5;
      w.write_rows(1, t, j0, f);
      w.write_flags(2, t, j0, n, q.data());
    }
  w.set_global_text("seatilt_status", "complete");
  w.commit();
}

/// Every value of variable NAME as stored (netCDF-C, no conversion).
std::vector<unsigned char> read_bytes(const std::string& path, const char* name) {
  int nc = 0, v = 0, nd = 0, dims[NC_MAX_VAR_DIMS];
  nc_type type = 0;
  nc_ok(nc_open(path.c_str(), NC_NOWRITE, &nc));
  nc_ok(nc_inq_varid(nc, name, &v));
  nc_ok(nc_inq_var(nc, v, nullptr, &type, &nd, dims, nullptr));
  std::size_t n = type == NC_FLOAT ? 4 : 1;
  for (int d = 0; d < nd; ++d) {
    std::size_t len = 0;
    nc_ok(nc_inq_dimlen(nc, dims[d], &len));
    n *= len;
  }
  std::vector<unsigned char> out(n);
  nc_ok(nc_get_var(nc, v, out.data()));
  nc_ok(nc_close(nc));
  return out;
}

std::string header(const std::string& path) {
  std::string h = run("ncdump -h -s '" + path + "'");
  return h.substr(h.find('\n'));  // without the first line, which names the file
}

}  // namespace

TEST_CASE(
    "direct chunk writes equal netCDF-C writes: values, ncdump -h -s, netCDF4-python, xarray") {
  TempDir tmp;
  struct Case {
    std::size_t nt, ny, nx, band;
    int deflate;
    Codec codec;
  };
  // 1000 columns: chunk rows = ceil(262144 / 1000) = 263 (writer.hpp): the
  // last chunk row is an edge chunk; bands of 100 rows are not aligned.
  const Case cases[] = {{2, 300, 1000, 100, 1, Codec::libdeflate},
                        {1, 300, 1000, 300, 4, Codec::zlib},
                        {0, 30, 40, 7, 1, Codec::libdeflate},
                        {3, 30, 40, 30, 0, Codec::libdeflate}};
  int n = 0;
  for (const Case& c : cases) {
    CAPTURE(n);
    const HeightInfo lay = layout(c.nt, c.ny, c.nx);
    const std::string direct = tmp.file("direct" + std::to_string(n) + ".nc");
    const std::string plain = tmp.file("plain" + std::to_string(n) + ".nc");
    ++n;
    WriterSettings s;
    s.deflate = c.deflate;
    s.codec = c.codec;
    std::string how;
    write_file(direct, lay, s, c.band, &how);
    CHECK(how.rfind("direct chunk writes (", 0) == 0);
    s.chunk_writes = ChunkWrites::netcdf;
    write_file(plain, lay, s, c.band, &how);
    CHECK(how == "netCDF-C (direct chunk writes switched off)");
    CHECK(header(direct) == header(plain));
    CHECK(header(direct).find("a:_ChunkSizes") != std::string::npos);  // ncdump ran
    for (const char* var : {"a", "b", "q"}) {
      CAPTURE(var);
      CHECK(read_bytes(direct, var) == read_bytes(plain, var));
    }
    if (c.ny * c.nx < 2000) {  // whole text dumps of the small cases
      const std::string dump_d = run("ncdump '" + direct + "'"),
                        dump_p = run("ncdump '" + plain + "'");
      CHECK(dump_d.substr(dump_d.find('\n')) == dump_p.substr(dump_p.find('\n')));
    }
    // netCDF4-python (raw values) and xarray (decoded, fill -> NaN) see the
    // same arrays (two cases: each check starts a Python interpreter).
    if (n != 2 && n != 3) continue;
    const std::string py =
        "import sys, numpy as np, netCDF4, xarray as xr\n"
        "a, b = netCDF4.Dataset(sys.argv[1]), netCDF4.Dataset(sys.argv[2])\n"
        "a.set_auto_maskandscale(False); b.set_auto_maskandscale(False)\n"
        "ok = all(a[v][:].tobytes() == b[v][:].tobytes() for v in ('a', 'b', 'q'))\n"
        "x, y = xr.open_dataset(sys.argv[1]), xr.open_dataset(sys.argv[2])\n"
        "ok = ok and all(np.array_equal(x[v].values, y[v].values, equal_nan=True) for v in ('a', "
        "'b', 'q'))\n"
        "ok = ok and int(np.isnan(x['a'].values).sum()) > 0\n"
        "print('same' if ok else 'different')\n";
    const std::string script = tmp.file("cmp.py");
    std::ofstream(script) << py;
    CHECK(run("/usr/bin/python3 '" + script + "' '" + direct + "' '" + plain + "'") == "same\n");
  }
}

TEST_CASE("pitfalls 6 and 7: attributes after direct writes, rows written twice, unwritten rows") {
  TempDir tmp;
  const HeightInfo lay = layout(2, 20, 30);
  const std::vector<OutputVariable> vars = {{"a", OutputType::float32, {}}};
  const std::string path = tmp.file("twice.nc");
  {
    Writer w(path, lay, vars, WriterSettings{});
    REQUIRE(w.write_path() == "direct chunk writes (libdeflate)");
    Field f(20, 30, 1.0);
    w.write_rows(0, 0, 0, f);
    w.set_global_text("note", "between writes");  // netCDF-C reopens the file
    for (double& v : f.data) v = 2.0;
    w.write_rows(0, 0, 5, Field(3, 30, 2.0));  // rows 5..7 again: read back, rewritten
    w.write_rows(0, 1, 0, Field(4, 30, 3.0));  // step 1: rows 4..19 never written
    w.commit();
  }
  int nc = 0, v = 0;
  nc_ok(nc_open(path.c_str(), NC_NOWRITE, &nc));
  nc_ok(nc_inq_varid(nc, "a", &v));
  std::vector<float> back(2 * 20 * 30);
  nc_ok(nc_get_var_float(nc, v, back.data()));
  char note[32] = {0};
  nc_ok(nc_get_att_text(nc, NC_GLOBAL, "note", note));
  nc_ok(nc_close(nc));
  CHECK(std::string(note) == "between writes");
  for (std::size_t j = 0; j < 20; ++j) {
    CHECK(back[j * 30 + 3] == (j >= 5 && j < 8 ? 2.0f : 1.0f));
    CHECK(back[(20 + j) * 30 + 3] == (j < 4 ? 3.0f : NC_FILL_FLOAT));
  }
}

TEST_CASE("misaligned encode_rows is refused on the direct path") {
  TempDir tmp;
  const HeightInfo lay = layout(1, 600, 1000);  // chunk rows 263
  Writer w(tmp.file("x.nc"), lay, {{"a", OutputType::float32, {}}}, WriterSettings{});
  std::vector<float> rows(10 * 1000, 1.0f);
  EncodedRows e;
  CHECK_THROWS_AS(w.encode_rows(0, 0, 5, 10, rows.data(), e), OutputError);
  std::vector<float> last(74 * 1000, 1.0f);
  w.encode_rows(0, 0, 526, 74, last.data(), e);  // the edge chunk row
  CHECK(e.chunks.size() == 1);
  w.store(e);
}
