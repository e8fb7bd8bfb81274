// Tests for seatilt/writer.hpp: files are written, committed, reopened with the
// netCDF-C API (the reference reader) and checked against what the writer was
// given, the netCDF-C constants (netcdf.h) and CF 1.12 (2.5.1 _FillValue, 3.5
// flags, 8.4 quantization).
#include "seatilt/writer.hpp"

#include <doctest/doctest.h>
#include <netcdf.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <limits>
#include <string>
#include <thread>
#include <vector>

#include "seatilt/error.hpp"

namespace fs = std::filesystem;
using seatilt::Attribute;
using seatilt::CoordVar;
using seatilt::Field;
using seatilt::HeightInfo;
using seatilt::OutputError;
using seatilt::OutputType;
using seatilt::OutputVariable;
using seatilt::UsageError;
using seatilt::Writer;
using seatilt::WriterSettings;

namespace {

/// A fresh folder under the system temp folder, removed with its contents.
struct TempDir {
  fs::path dir;
  TempDir() {
    std::string templ = (fs::temp_directory_path() / "seatilt-writer-XXXXXX").string();
    REQUIRE(::mkdtemp(templ.data()) != nullptr);
    dir = templ;
  }
  ~TempDir() {
    std::error_code ec;
    fs::permissions(dir, fs::perms::owner_all, fs::perm_options::add, ec);
    fs::remove_all(dir, ec);
  }
  [[nodiscard]] std::string file(const std::string& name) const { return (dir / name).string(); }
  [[nodiscard]] std::vector<std::string> entries() const {
    std::vector<std::string> names;
    for (const auto& e : fs::directory_iterator(dir)) names.push_back(e.path().filename().string());
    return names;
  }
};

Attribute text(const std::string& name, const std::string& value, int type = NC_CHAR) {
  Attribute a;
  a.name = name;
  a.nc_type = type;
  a.text = value;
  return a;
}

Attribute numbers(const std::string& name, int type, std::vector<double> values) {
  Attribute a;
  a.name = name;
  a.nc_type = type;
  a.values = std::move(values);
  return a;
}

/// Layout as the reader would hand it over: latitude descending (NC_FLOAT,
/// with packing/missing attributes that must not be copied), longitude
/// ascending (NC_DOUBLE), optional time (NC_INT, days since 1950-01-01).
HeightInfo make_layout(std::size_t ny, std::size_t nx, std::size_t nt, bool with_time) {
  HeightInfo h;
  h.path = "in.nc";
  h.ny = ny;
  h.nx = nx;
  h.nt = with_time ? nt : 1;
  h.lat.name = "latitude";
  h.lat.dim = "latitude";
  h.lat.nc_type = NC_FLOAT;
  for (std::size_t j = 0; j < ny; ++j) h.lat.values.push_back(60.0 - 0.25 * static_cast<double>(j));
  h.lat.attrs = {text("standard_name", "latitude"), text("units", "degrees_north"),
                 numbers("_FillValue", NC_FLOAT, {-999.0}),
                 numbers("valid_min", NC_FLOAT, {-90.0}), numbers("valid_max", NC_FLOAT, {90.0}),
                 text("axis", "Y", NC_STRING)};
  h.lon.name = "longitude";
  h.lon.dim = "longitude";
  h.lon.nc_type = NC_DOUBLE;
  for (std::size_t i = 0; i < nx; ++i) h.lon.values.push_back(-20.0 + 0.125 * static_cast<double>(i));
  h.lon.attrs = {text("standard_name", "longitude"), text("units", "degrees_east"),
                 numbers("scale_factor", NC_DOUBLE, {1.0}), text("bounds", "longitude_bnds")};
  if (with_time) {
    CoordVar t;
    t.name = "time";
    t.dim = "time";
    t.nc_type = NC_INT;
    for (std::size_t k = 0; k < nt; ++k) t.values.push_back(27000.0 + static_cast<double>(k));
    t.attrs = {text("standard_name", "time"), text("units", "days since 1950-01-01"),
               text("calendar", "standard")};
    h.time = t;
    h.calendar = "standard";
  }
  return h;
}

/// Deterministic smooth test values (m s-1), exactly reproducible.
double value_at(std::size_t t, std::size_t j, std::size_t i) {
  return 0.5 * std::sin(0.01 * static_cast<double>(i) + 0.03 * static_cast<double>(j)) +
         0.1 * static_cast<double>(t);
}

std::string att_text(int ncid, int varid, const char* name) {
  std::size_t len = 0;
  nc_type type = 0;
  REQUIRE(nc_inq_att(ncid, varid, name, &type, &len) == NC_NOERR);
  CHECK(type == NC_CHAR);
  std::string s(len, '\0');
  REQUIRE(nc_get_att_text(ncid, varid, name, s.data()) == NC_NOERR);
  return s;
}

bool has_att(int ncid, int varid, const char* name) {
  return nc_inq_attid(ncid, varid, name, nullptr) == NC_NOERR;
}

std::string dim_name(int ncid, int dimid) {
  char name[NC_MAX_NAME + 1];
  REQUIRE(nc_inq_dimname(ncid, dimid, name) == NC_NOERR);
  return name;
}

std::string file_bytes(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return {std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>()};
}

/// RAII read-only netCDF handle for checks.
struct NcFile {
  int id = -1;
  explicit NcFile(const std::string& path) { REQUIRE(nc_open(path.c_str(), NC_NOWRITE, &id) == NC_NOERR); }
  ~NcFile() { nc_close(id); }
  int var(const char* name) const {
    int v = -1;
    REQUIRE_MESSAGE(nc_inq_varid(id, name, &v) == NC_NOERR, name);
    return v;
  }
};

}  // namespace

TEST_CASE("3-D output: dimensions, coordinates, values, fill, flags, chunking, deflate") {
  TempDir tmp;
  const std::string out = tmp.file("out.nc");
  const std::size_t ny = 150, nx = 4096, nt = 2;
  const HeightInfo layout = make_layout(ny, nx, nt, true);

  OutputVariable u{"u", OutputType::float32,
                   {text("standard_name", "surface_geostrophic_eastward_sea_water_velocity"),
                    text("units", "m s-1", NC_STRING), numbers("valid_min", NC_FLOAT, {-5.0}),
                    numbers("_FillValue", NC_DOUBLE, {-1.0})}};  // ignored: the writer owns _FillValue
  OutputVariable q{"quality", OutputType::flag8,
                   {numbers("flag_values", NC_BYTE, {0, 1, 2}),
                    text("flag_meanings", "ok one_sided masked")}};
  WriterSettings settings;
  settings.deflate = 4;
  settings.global_attrs = {text("Conventions", "CF-1.12, ACDD-1.3"),
                           text("title", "Test basin"), numbers("order", NC_INT, {2})};

  {
    Writer w(out, layout, {u, q}, settings);
    // chunk_rows = clamp(ceil(262144 / 4096), 1, 150) = 64 (writer.hpp contract).
    CHECK(w.chunk_rows() == 64);
    CHECK(w.path() == out);

    // The temporary sibling follows ".<basename>.tmp-<pid>-<random>".
    const auto names = tmp.entries();
    REQUIRE(names.size() == 1);
    CHECK(names[0].rfind(".out.nc.tmp-" + std::to_string(::getpid()) + "-", 0) == 0);
    CHECK(!fs::exists(out));

    // Bands of 50 rows, deliberately not aligned to the 64-row chunks.
    for (std::size_t t = 0; t < nt; ++t) {
      for (std::size_t j0 = 0; j0 < ny; j0 += 50) {
        const std::size_t nrows = std::min<std::size_t>(50, ny - j0);
        Field band(nrows, nx);
        std::vector<std::uint8_t> flags(nrows * nx);
        for (std::size_t j = 0; j < nrows; ++j)
          for (std::size_t i = 0; i < nx; ++i) {
            band.at(j, i) = value_at(t, j0 + j, i);
            flags[j * nx + i] = static_cast<std::uint8_t>((j0 + j + i) % 3);
          }
        if (j0 == 0) {
          band.at(0, 0) = std::numeric_limits<double>::quiet_NaN();
          band.at(0, 1) = std::numeric_limits<double>::infinity();
          band.at(0, 2) = -std::numeric_limits<double>::infinity();
          band.at(0, 3) = 1e39;  // beyond FLT_MAX = 3.4028235e38 (IEEE 754 binary32)
          band.at(0, 4) = static_cast<double>(FLT_MAX);  // largest float stays a value
        }
        w.write_rows(0, t, j0, band);
        w.write_flags(1, t, j0, nrows, flags.data());
      }
    }
    w.set_global_text("history", "first");
    w.set_global_text("history", "second, replaced");
    w.commit();
  }
  // Only the final file is left; no temporary.
  CHECK(tmp.entries() == std::vector<std::string>{"out.nc"});

  NcFile f(out);
  int format = 0;
  REQUIRE(nc_inq_format(f.id, &format) == NC_NOERR);
  CHECK(format == NC_FORMAT_NETCDF4);  // not the classic model

  // Dimensions: time unlimited first, then latitude, longitude.
  int ndims = 0, unlimdim = -1;
  REQUIRE(nc_inq(f.id, &ndims, nullptr, nullptr, &unlimdim) == NC_NOERR);
  CHECK(ndims == 3);
  CHECK(dim_name(f.id, unlimdim) == "time");
  std::size_t len = 0;
  REQUIRE(nc_inq_dimlen(f.id, unlimdim, &len) == NC_NOERR);
  CHECK(len == nt);

  const int uid = f.var("u"), qid = f.var("quality");
  int dimids[NC_MAX_VAR_DIMS];
  int vndims = 0;
  nc_type vtype = 0;
  REQUIRE(nc_inq_var(f.id, uid, nullptr, &vtype, &vndims, dimids, nullptr) == NC_NOERR);
  CHECK(vtype == NC_FLOAT);
  REQUIRE(vndims == 3);
  CHECK(dim_name(f.id, dimids[0]) == "time");
  CHECK(dim_name(f.id, dimids[1]) == "latitude");
  CHECK(dim_name(f.id, dimids[2]) == "longitude");
  REQUIRE(nc_inq_var(f.id, qid, nullptr, &vtype, &vndims, nullptr, nullptr) == NC_NOERR);
  CHECK(vtype == NC_BYTE);
  CHECK(vndims == 3);

  // Coordinates: types kept, values exact, descending latitude kept, packing
  // and missing-data attributes dropped, text attributes as NC_CHAR.
  const int latid = f.var("latitude"), lonid = f.var("longitude"), tid = f.var("time");
  REQUIRE(nc_inq_vartype(f.id, latid, &vtype) == NC_NOERR);
  CHECK(vtype == NC_FLOAT);
  REQUIRE(nc_inq_vartype(f.id, lonid, &vtype) == NC_NOERR);
  CHECK(vtype == NC_DOUBLE);
  REQUIRE(nc_inq_vartype(f.id, tid, &vtype) == NC_NOERR);
  CHECK(vtype == NC_INT);
  std::vector<double> lat(ny), lon(nx), time(nt);
  REQUIRE(nc_get_var_double(f.id, latid, lat.data()) == NC_NOERR);
  REQUIRE(nc_get_var_double(f.id, lonid, lon.data()) == NC_NOERR);
  REQUIRE(nc_get_var_double(f.id, tid, time.data()) == NC_NOERR);
  CHECK(lat == layout.lat.values);
  CHECK(lon == layout.lon.values);
  CHECK(time == layout.time->values);
  CHECK(att_text(f.id, latid, "units") == "degrees_north");
  CHECK(att_text(f.id, latid, "axis") == "Y");
  CHECK(!has_att(f.id, latid, "_FillValue"));
  CHECK(!has_att(f.id, latid, "valid_min"));
  CHECK(!has_att(f.id, latid, "valid_max"));
  CHECK(!has_att(f.id, lonid, "scale_factor"));
  CHECK(!has_att(f.id, lonid, "bounds"));  // its bounds variable is not copied (CF 7.1)
  CHECK(att_text(f.id, tid, "units") == "days since 1950-01-01");
  CHECK(att_text(f.id, tid, "calendar") == "standard");

  // _FillValue: netCDF default float fill 9.9692099683868690e+36 (netcdf.h
  // NC_FILL_FLOAT), first attribute, NC_FLOAT; the caller's -1 is ignored.
  nc_type ftype = 0;
  REQUIRE(nc_inq_atttype(f.id, uid, "_FillValue", &ftype) == NC_NOERR);
  CHECK(ftype == NC_FLOAT);
  float fill = 0;
  REQUIRE(nc_get_att_float(f.id, uid, "_FillValue", &fill) == NC_NOERR);
  CHECK(fill == 9.9692099683868690e+36f);
  char first[NC_MAX_NAME + 1];
  REQUIRE(nc_inq_attname(f.id, uid, 0, first) == NC_NOERR);
  CHECK(std::string(first) == "_FillValue");
  CHECK(att_text(f.id, uid, "units") == "m s-1");
  REQUIRE(nc_inq_atttype(f.id, uid, "valid_min", &ftype) == NC_NOERR);
  CHECK(ftype == NC_FLOAT);
  CHECK(!has_att(f.id, qid, "_FillValue"));  // flags: every cell has a value
  REQUIRE(nc_inq_atttype(f.id, qid, "flag_values", &ftype) == NC_NOERR);
  CHECK(ftype == NC_BYTE);  // CF 3.5: flag_values of the variable's type
  CHECK(att_text(f.id, qid, "flag_meanings") == "ok one_sided masked");

  // Values: exact to float (round to nearest, IEEE 754); non-finite and
  // out-of-float-range values are fill.
  std::vector<float> got(nt * ny * nx);
  REQUIRE(nc_get_var_float(f.id, uid, got.data()) == NC_NOERR);
  std::size_t mismatches = 0;
  for (std::size_t t = 0; t < nt; ++t)
    for (std::size_t j = 0; j < ny; ++j)
      for (std::size_t i = 0; i < nx; ++i) {
        const float g = got[(t * ny + j) * nx + i];
        float want = static_cast<float>(value_at(t, j, i));
        if (j == 0 && i < 4) want = fill;
        if (j == 0 && i == 4) want = FLT_MAX;
        if (g != want) ++mismatches;
      }
  CHECK(mismatches == 0);
  std::vector<signed char> qgot(nt * ny * nx);
  REQUIRE(nc_get_var_schar(f.id, qid, qgot.data()) == NC_NOERR);
  mismatches = 0;
  for (std::size_t t = 0; t < nt; ++t)
    for (std::size_t j = 0; j < ny; ++j)
      for (std::size_t i = 0; i < nx; ++i)
        if (qgot[(t * ny + j) * nx + i] != static_cast<signed char>((j + i) % 3)) ++mismatches;
  CHECK(mismatches == 0);

  // Chunking (1, 64, 4096) and deflate 4 with shuffle on both variables.
  for (int v : {uid, qid}) {
    int storage = -1;
    std::size_t chunks[3] = {0, 0, 0};
    REQUIRE(nc_inq_var_chunking(f.id, v, &storage, chunks) == NC_NOERR);
    CHECK(storage == NC_CHUNKED);
    CHECK(chunks[0] == 1);
    CHECK(chunks[1] == 64);
    CHECK(chunks[2] == nx);
    int shuffle = -1, deflate = -1, level = -1;
    REQUIRE(nc_inq_var_deflate(f.id, v, &shuffle, &deflate, &level) == NC_NOERR);
    CHECK(shuffle == 1);
    CHECK(deflate == 1);
    CHECK(level == 4);
  }
  int qmode = -1, nsd = -1;
  REQUIRE(nc_inq_var_quantize(f.id, uid, &qmode, &nsd) == NC_NOERR);
  CHECK(qmode == NC_NOQUANTIZE);
  CHECK(!has_att(f.id, uid, "quantization"));
  int dummy = -1;
  CHECK(nc_inq_varid(f.id, "quantization_info", &dummy) == NC_ENOTVAR);

  // Global attributes in the given order, then history (replaced once).
  char gname[NC_MAX_NAME + 1];
  REQUIRE(nc_inq_attname(f.id, NC_GLOBAL, 0, gname) == NC_NOERR);
  CHECK(std::string(gname) == "Conventions");
  REQUIRE(nc_inq_attname(f.id, NC_GLOBAL, 1, gname) == NC_NOERR);
  CHECK(std::string(gname) == "title");
  REQUIRE(nc_inq_attname(f.id, NC_GLOBAL, 2, gname) == NC_NOERR);
  CHECK(std::string(gname) == "order");
  CHECK(att_text(f.id, NC_GLOBAL, "Conventions") == "CF-1.12, ACDD-1.3");
  CHECK(att_text(f.id, NC_GLOBAL, "history") == "second, replaced");
  int order = 0;
  REQUIRE(nc_inq_atttype(f.id, NC_GLOBAL, "order", &ftype) == NC_NOERR);
  CHECK(ftype == NC_INT);
  REQUIRE(nc_get_att_int(f.id, NC_GLOBAL, "order", &order) == NC_NOERR);
  CHECK(order == 2);
}

TEST_CASE("2-D output without time, no compression, small grid, unwritten rows read as fill") {
  TempDir tmp;
  const std::string out = tmp.file("flat.nc");
  const std::size_t ny = 7, nx = 5;
  HeightInfo layout = make_layout(ny, nx, 1, false);
  // A packed short latitude: unpacked values are fractional -> NC_DOUBLE.
  layout.lat.nc_type = NC_SHORT;
  // An integer longitude with integral values keeps its type.
  layout.lon.nc_type = NC_INT;
  for (std::size_t i = 0; i < nx; ++i) layout.lon.values[i] = static_cast<double>(i) * 10.0;
  WriterSettings settings;
  settings.deflate = 0;
  {
    Writer w(out, layout, {OutputVariable{"speed", OutputType::float32, {}}}, settings);
    CHECK(w.chunk_rows() == ny);  // ceil(262144 / 5) clamped to ny = 7
    Field band(3, nx, 0.25);
    w.write_rows(0, 0, 2, band);  // rows 2..4 only
    CHECK_THROWS_AS(w.write_rows(0, 1, 0, band), OutputError);  // no time step 1 without time
    w.commit();
  }
  NcFile f(out);
  int ndims = 0, unlimdim = -2;
  REQUIRE(nc_inq(f.id, &ndims, nullptr, nullptr, &unlimdim) == NC_NOERR);
  CHECK(ndims == 2);
  CHECK(unlimdim == -1);  // no unlimited dimension
  const int sid = f.var("speed");
  int vndims = 0, dimids[NC_MAX_VAR_DIMS];
  REQUIRE(nc_inq_var(f.id, sid, nullptr, nullptr, &vndims, dimids, nullptr) == NC_NOERR);
  REQUIRE(vndims == 2);
  CHECK(dim_name(f.id, dimids[0]) == "latitude");
  CHECK(dim_name(f.id, dimids[1]) == "longitude");
  nc_type type = 0;
  REQUIRE(nc_inq_vartype(f.id, f.var("latitude"), &type) == NC_NOERR);
  CHECK(type == NC_DOUBLE);
  REQUIRE(nc_inq_vartype(f.id, f.var("longitude"), &type) == NC_NOERR);
  CHECK(type == NC_INT);
  std::vector<double> lat(ny);
  REQUIRE(nc_get_var_double(f.id, f.var("latitude"), lat.data()) == NC_NOERR);
  CHECK(lat == layout.lat.values);

  int storage = -1;
  std::size_t chunks[2] = {0, 0};
  REQUIRE(nc_inq_var_chunking(f.id, sid, &storage, chunks) == NC_NOERR);
  CHECK(storage == NC_CHUNKED);
  CHECK(chunks[0] == ny);
  CHECK(chunks[1] == nx);
  int shuffle = -1, deflate = -1, level = -1;
  REQUIRE(nc_inq_var_deflate(f.id, sid, &shuffle, &deflate, &level) == NC_NOERR);
  CHECK(shuffle == 0);
  CHECK(deflate == 0);

  std::vector<float> got(ny * nx);
  REQUIRE(nc_get_var_float(f.id, sid, got.data()) == NC_NOERR);
  for (std::size_t j = 0; j < ny; ++j)
    for (std::size_t i = 0; i < nx; ++i)
      CHECK(got[j * nx + i] == ((j >= 2 && j < 5) ? 0.25f : NC_FILL_FLOAT));
}

TEST_CASE("integer time with fractional values is written as NC_DOUBLE") {
  TempDir tmp;
  HeightInfo layout = make_layout(3, 4, 2, true);
  layout.time->values = {27000.5, 27001.5};  // noon: not representable in NC_INT
  {
    Writer w(tmp.file("t.nc"), layout, {}, WriterSettings{});
    w.commit();
  }
  NcFile f(tmp.file("t.nc"));
  nc_type type = 0;
  REQUIRE(nc_inq_vartype(f.id, f.var("time"), &type) == NC_NOERR);
  CHECK(type == NC_DOUBLE);
  double t[2] = {0, 0};
  REQUIRE(nc_get_var_double(f.id, f.var("time"), t) == NC_NOERR);
  CHECK(t[0] == 27000.5);
  CHECK(t[1] == 27001.5);
}

TEST_CASE("quantisation: Granular BitRound with the CF 1.12 8.4 container") {
  TempDir tmp;
  const std::string out = tmp.file("q.nc");
  const std::size_t ny = 20, nx = 30;
  const HeightInfo layout = make_layout(ny, nx, 1, true);
  WriterSettings settings;
  settings.significant_digits = 3;
  {
    Writer w(out, layout,
             {OutputVariable{"u", OutputType::float32, {text("units", "m s-1")}},
              OutputVariable{"quality", OutputType::flag8, {}}},
             settings);
    Field band(ny, nx);
    for (std::size_t j = 0; j < ny; ++j)
      for (std::size_t i = 0; i < nx; ++i) band.at(j, i) = value_at(0, j, i) + 0.001;
    band.at(3, 3) = std::numeric_limits<double>::quiet_NaN();  // must become fill, not -0.0
    w.write_rows(0, 0, 0, band);
    std::vector<std::uint8_t> flags(ny * nx, 1);
    w.write_flags(1, 0, 0, ny, flags.data());
    w.commit();
  }
  NcFile f(out);
  const int uid = f.var("u"), qid = f.var("quality");
  int mode = -1, nsd = -1;
  REQUIRE(nc_inq_var_quantize(f.id, uid, &mode, &nsd) == NC_NOERR);
  CHECK(mode == NC_QUANTIZE_GRANULARBR);  // netcdf.h: 2
  CHECK(nsd == 3);
  // CF 1.12 8.4: data variable points to the container and gives the NSD.
  CHECK(att_text(f.id, uid, "quantization") == "quantization_info");
  nc_type type = 0;
  REQUIRE(nc_inq_atttype(f.id, uid, "quantization_nsd", &type) == NC_NOERR);
  CHECK(type == NC_INT);
  int nsd_att = 0;
  REQUIRE(nc_get_att_int(f.id, uid, "quantization_nsd", &nsd_att) == NC_NOERR);
  CHECK(nsd_att == 3);
  // Not for integer variables (CF 1.12 8.4).
  CHECK(!has_att(f.id, qid, "quantization"));
  REQUIRE(nc_inq_var_quantize(f.id, qid, &mode, &nsd) == NC_NOERR);
  CHECK(mode == NC_NOQUANTIZE);

  const int cid = f.var("quantization_info");
  int cndims = -1;
  REQUIRE(nc_inq_var(f.id, cid, nullptr, &type, &cndims, nullptr, nullptr) == NC_NOERR);
  CHECK(type == NC_INT);
  CHECK(cndims == 0);
  CHECK(att_text(f.id, cid, "algorithm") == "granular_bitround");
  std::string version = nc_inq_libvers();
  version = version.substr(0, version.find(' '));
  CHECK(att_text(f.id, cid, "implementation") == "libnetcdf version " + version);

  // Values keep 3 significant digits: relative error <= half a unit of the
  // third digit, 5e-3 (definition of significant digits; netCDF-C
  // nc_def_var_quantize documentation); the masked cell is exactly fill.
  std::vector<float> got(ny * nx);
  REQUIRE(nc_get_var_float(f.id, uid, got.data()) == NC_NOERR);
  CHECK(got[3 * nx + 3] == NC_FILL_FLOAT);
  std::size_t bad = 0, changed = 0;
  for (std::size_t j = 0; j < ny; ++j)
    for (std::size_t i = 0; i < nx; ++i) {
      if (j == 3 && i == 3) continue;
      const double v = value_at(0, j, i) + 0.001;
      const double g = static_cast<double>(got[j * nx + i]);
      if (std::fabs(g - v) > 5e-3 * std::fabs(v)) ++bad;
      if (got[j * nx + i] != static_cast<float>(v)) ++changed;
    }
  CHECK(bad == 0);
  CHECK(changed > 0);  // quantisation did take place
}

TEST_CASE("existing output: refused without force (bytes unchanged), replaced with force") {
  TempDir tmp;
  const std::string out = tmp.file("exists.nc");
  {
    std::ofstream o(out, std::ios::binary);
    o << "not a netCDF file, must survive";
  }
  const std::string before = file_bytes(out);
  const HeightInfo layout = make_layout(4, 6, 1, false);
  try {
    Writer w(out, layout, {}, WriterSettings{});
    FAIL("no OutputError");
  } catch (const OutputError& e) {
    CHECK(std::string(e.what()) == out + ": output exists (use --force to overwrite)");
    CHECK(static_cast<int>(e.code()) == 4);  // DESIGN.md exit codes
  }
  CHECK(file_bytes(out) == before);
  CHECK(tmp.entries() == std::vector<std::string>{"exists.nc"});

  WriterSettings force;
  force.force = true;
  {
    Writer w(out, layout, {OutputVariable{"v", OutputType::float32, {}}}, force);
    // Until commit the old file is untouched.
    CHECK(file_bytes(out) == before);
    w.commit();
  }
  CHECK(file_bytes(out) != before);
  NcFile f(out);
  f.var("v");
  CHECK(tmp.entries() == std::vector<std::string>{"exists.nc"});
}

TEST_CASE("an output that appears before commit is not clobbered without force") {
  TempDir tmp;
  const std::string out = tmp.file("race.nc");
  const HeightInfo layout = make_layout(4, 6, 1, false);
  Writer w(out, layout, {}, WriterSettings{});
  {
    std::ofstream o(out, std::ios::binary);
    o << "written by someone else";
  }
  CHECK_THROWS_WITH_AS(w.commit(), (out + ": output exists (use --force to overwrite)").c_str(),
                       OutputError);
  CHECK(file_bytes(out) == "written by someone else");
  CHECK(tmp.entries() == std::vector<std::string>{"race.nc"});
}

TEST_CASE("destruction without commit leaves nothing behind") {
  TempDir tmp;
  const HeightInfo layout = make_layout(10, 8, 3, true);
  {
    Writer w(tmp.file("gone.nc"), layout, {OutputVariable{"u", OutputType::float32, {}}},
             WriterSettings{});
    w.write_rows(0, 1, 2, Field(4, 8, 1.0));
    CHECK(tmp.entries().size() == 1);  // the temporary
  }
  CHECK(tmp.entries().empty());
}

TEST_CASE("move keeps one owner of the temporary file") {
  TempDir tmp;
  const HeightInfo layout = make_layout(5, 5, 1, false);
  Writer a(tmp.file("m.nc"), layout, {OutputVariable{"u", OutputType::float32, {}}},
           WriterSettings{});
  Writer b(std::move(a));
  b.write_rows(0, 0, 0, Field(5, 5, 2.0));
  b.commit();
  CHECK(tmp.entries() == std::vector<std::string>{"m.nc"});
  CHECK_THROWS_AS(b.commit(), OutputError);  // twice
  CHECK_THROWS_AS(b.write_rows(0, 0, 0, Field(5, 5, 2.0)), OutputError);  // after commit
}

TEST_CASE("close then publish on another thread; out of order; destroyed between") {
  TempDir tmp;
  const HeightInfo layout = make_layout(5, 5, 1, false);
  {
    Writer w(tmp.file("p.nc"), layout, {OutputVariable{"u", OutputType::float32, {}}},
             WriterSettings{});
    CHECK_THROWS_WITH_AS(w.publish(), (tmp.file("p.nc") + ": publish before close").c_str(),
                         OutputError);
    w.write_rows(0, 0, 0, Field(5, 5, 2.0));
    w.close();
    CHECK_THROWS_AS(w.close(), OutputError);                                // twice
    CHECK_THROWS_AS(w.write_rows(0, 0, 0, Field(5, 5, 2.0)), OutputError);  // after close
    // Closed but unpublished: only the temporary exists, the output does not.
    CHECK(tmp.entries().size() == 1);
    CHECK(tmp.entries() != std::vector<std::string>{"p.nc"});
    std::thread other([&w] { w.publish(); });  // publish makes no library call
    other.join();
    CHECK(tmp.entries() == std::vector<std::string>{"p.nc"});
    CHECK_THROWS_AS(w.publish(), OutputError);  // twice
  }
  int ncid = -1;
  REQUIRE(nc_open(tmp.file("p.nc").c_str(), NC_NOWRITE, &ncid) == NC_NOERR);
  int varid = -1;
  REQUIRE(nc_inq_varid(ncid, "u", &varid) == NC_NOERR);
  float v = 0;
  const std::size_t at[2] = {4, 4};
  REQUIRE(nc_get_var1_float(ncid, varid, at, &v) == NC_NOERR);
  CHECK(v == 2.0f);
  nc_close(ncid);
  {
    Writer w(tmp.file("q.nc"), layout, {OutputVariable{"u", OutputType::float32, {}}},
             WriterSettings{});
    w.close();
  }  // destroyed between close and publish: the temporary goes, nothing at q.nc
  CHECK(tmp.entries() == std::vector<std::string>{"p.nc"});
}

TEST_CASE("missing or unwritable folder, bad arguments") {
  TempDir tmp;
  const HeightInfo layout = make_layout(4, 6, 2, true);

  const std::string missing = tmp.file("no/such/folder/out.nc");
  try {
    Writer w(missing, layout, {}, WriterSettings{});
    FAIL("no OutputError");
  } catch (const OutputError& e) {
    const std::string msg = e.what();
    CHECK(msg.rfind(missing + ":", 0) == 0);
    CHECK(msg.find(std::strerror(ENOENT)) != std::string::npos);
  }

  // The output path is a folder.
  fs::create_directory(tmp.dir / "sub");
  CHECK_THROWS_AS(Writer(tmp.file("sub"), layout, {}, WriterSettings{}), OutputError);
  CHECK_THROWS_AS(Writer(tmp.file("sub/"), layout, {}, WriterSettings{}), OutputError);

  const fs::path locked = tmp.dir / "locked";
  fs::create_directory(locked);
  ::chmod(locked.c_str(), 0555);
  if (::geteuid() == 0) {
    MESSAGE("running as root: chmod 0555 does not block writes, unwritable-folder check skipped");
  } else {
    const std::string path = (locked / "out.nc").string();
    try {
      Writer w(path, layout, {}, WriterSettings{});
      FAIL("no OutputError");
    } catch (const OutputError& e) {
      const std::string msg = e.what();
      CHECK(msg.rfind(path + ":", 0) == 0);
      CHECK(msg.find(std::strerror(EACCES)) != std::string::npos);
    }
    CHECK(fs::is_empty(locked));
  }
  ::chmod(locked.c_str(), 0755);

  // Settings out of range are usage errors (exit 2), checked before any file exists.
  WriterSettings s;
  s.deflate = 10;
  CHECK_THROWS_AS(Writer(tmp.file("a.nc"), layout, {}, s), UsageError);
  s.deflate = -1;
  CHECK_THROWS_AS(Writer(tmp.file("a.nc"), layout, {}, s), UsageError);
  s.deflate = 1;
  s.significant_digits = 8;  // netCDF-C 4.9: NC_QUANTIZE_MAX_FLOAT_NSD = 7
  CHECK_THROWS_AS(Writer(tmp.file("a.nc"), layout, {}, s), UsageError);
  s.significant_digits = -1;
  CHECK_THROWS_AS(Writer(tmp.file("a.nc"), layout, {}, s), UsageError);
  CHECK(!fs::exists(tmp.file("a.nc")));

  // Misuse of write_rows / write_flags is an OutputError naming the variable.
  {
    Writer w(tmp.file("b.nc"), layout,
             {OutputVariable{"u", OutputType::float32, {}},
              OutputVariable{"quality", OutputType::flag8, {}}},
             WriterSettings{});
    CHECK_THROWS_AS(w.write_rows(0, 0, 0, Field(2, 5)), OutputError);   // nx 5 != 6
    CHECK_THROWS_AS(w.write_rows(0, 0, 3, Field(2, 6)), OutputError);   // rows 3..4 of 4
    CHECK_THROWS_AS(w.write_rows(0, 2, 0, Field(2, 6)), OutputError);   // time step 2 of 2
    CHECK_THROWS_AS(w.write_rows(1, 0, 0, Field(2, 6)), OutputError);   // flag variable
    CHECK_THROWS_AS(w.write_rows(2, 0, 0, Field(2, 6)), OutputError);   // no variable 2
    std::vector<std::uint8_t> flags(12);
    CHECK_THROWS_AS(w.write_flags(0, 0, 0, 2, flags.data()), OutputError);  // float variable
    try {
      w.write_rows(0, 0, 0, Field(2, 5));
    } catch (const OutputError& e) {
      CHECK(std::string(e.what()).rfind(tmp.file("b.nc") + ": variable u: ", 0) == 0);
    }
  }
  // A netCDF refusal (duplicate variable name) is an OutputError, no file left.
  CHECK_THROWS_AS(Writer(tmp.file("c.nc"), layout,
                         {OutputVariable{"u", OutputType::float32, {}},
                          OutputVariable{"u", OutputType::float32, {}}},
                         WriterSettings{}),
                  OutputError);
  // A variable named like a coordinate collides too.
  CHECK_THROWS_AS(Writer(tmp.file("c.nc"), layout,
                         {OutputVariable{"latitude", OutputType::float32, {}}}, WriterSettings{}),
                  OutputError);
  std::vector<std::string> left = tmp.entries();
  std::sort(left.begin(), left.end());
  CHECK(left == std::vector<std::string>{"locked", "sub"});
}
