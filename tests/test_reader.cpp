// Tests of seatilt/reader.hpp: files are generated here with the netCDF-C API
// in a private temporary folder; expected calendar dates come from cftime
// 1.6.2 (Debian 12 python3-cftime), as noted beside each value.
#include "seatilt/reader.hpp"

#include <doctest/doctest.h>
#include <netcdf.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <iterator>
#include <limits>
#include <string>
#include <vector>

#include "seatilt/error.hpp"

namespace fs = std::filesystem;
using seatilt::CivilTime;
using seatilt::decode_cf_time;
using seatilt::Field;
using seatilt::HeightKind;
using seatilt::InputError;
using seatilt::Reader;
using seatilt::ReaderOptions;

namespace {

#define NC(call) REQUIRE((call) == NC_NOERR)

/// Private temporary folder, removed at the end of the test.
struct TempDir {
  fs::path path;
  TempDir() {
    std::string templ = (fs::temp_directory_path() / "seatilt-reader-XXXXXX").string();
    REQUIRE(mkdtemp(templ.data()) != nullptr);
    path = templ;
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path, ec);
  }
  [[nodiscard]] std::string file(const std::string& name) const { return (path / name).string(); }
};

/// Minimal writer over the netCDF-C API for building test inputs.
class NcBuilder {
public:
  NcBuilder(const std::string& path, int cmode) { NC(nc_create(path.c_str(), cmode | NC_CLOBBER, &id_)); }
  ~NcBuilder() {
    if (id_ >= 0) nc_close(id_);
  }
  int dim(const char* name, std::size_t len) {
    int d = -1;
    NC(nc_def_dim(id_, name, len, &d));
    return d;
  }
  int var(const char* name, nc_type type, std::vector<int> dims) {
    int v = -1;
    NC(nc_def_var(id_, name, type, static_cast<int>(dims.size()), dims.data(), &v));
    return v;
  }
  void text(int var, const char* name, const std::string& value) {
    NC(nc_put_att_text(id_, var, name, value.size(), value.c_str()));
  }
  void number(int var, const char* name, nc_type type, std::vector<double> values) {
    NC(nc_put_att_double(id_, var, name, type, values.size(), values.data()));
  }
  [[nodiscard]] int id() const { return id_; }
  void enddef() { NC(nc_enddef(id_)); }
  void put(int var, const std::vector<double>& values) { NC(nc_put_var_double(id_, var, values.data())); }
  /// Writes float data as is (nc_put_var_double refuses +-Inf for NC_FLOAT with NC_ERANGE).
  void put_float(int var, const std::vector<double>& values) {
    std::vector<float> f(values.begin(), values.end());
    NC(nc_put_var_float(id_, var, f.data()));
  }
  void close() {
    NC(nc_close(id_));
    id_ = -1;
  }
  /// Defines 1-D lat and lon coordinate variables (CF units); returns {lat dim, lon dim}.
  std::pair<int, int> latlon(const std::vector<double>& lat, const std::vector<double>& lon) {
    const int dy = dim("lat", lat.size());
    const int dx = dim("lon", lon.size());
    lat_ = var("lat", NC_DOUBLE, {dy});
    text(lat_, "units", "degrees_north");
    lon_ = var("lon", NC_DOUBLE, {dx});
    text(lon_, "units", "degrees_east");
    lat_values_ = lat;
    lon_values_ = lon;
    return {dy, dx};
  }
  /// Writes the coordinates defined by latlon(); call after enddef().
  void put_latlon() {
    put(lat_, lat_values_);
    put(lon_, lon_values_);
  }

private:
  int id_ = -1;
  int lat_ = -1, lon_ = -1;
  std::vector<double> lat_values_, lon_values_;
};

const std::vector<double> lat3 = {-10.0, 0.0, 10.0};
const std::vector<double> lon4 = {0.0, 90.0, 180.0, 270.0};

/// A (lat, lon) float height variable NAME with STANDARD_NAME and UNITS, values 0.25*k.
void simple_file(const std::string& path, int cmode, const std::string& name,
                 const std::string& standard_name, const std::string& units = "m") {
  NcBuilder b(path, cmode);
  auto [dy, dx] = b.latlon(lat3, lon4);
  const int v = b.var(name.c_str(), NC_FLOAT, {dy, dx});
  if (!standard_name.empty()) b.text(v, "standard_name", standard_name);
  if (!units.empty()) b.text(v, "units", units);
  b.enddef();
  b.put_latlon();
  std::vector<double> values(12);
  for (std::size_t k = 0; k < values.size(); ++k) values[k] = 0.25 * static_cast<double>(k);
  b.put(v, values);
}

std::string error_of(const std::string& path, const ReaderOptions& options = {}) {
  try {
    Reader r(path, options);
    Field f;
    for (std::size_t t = 0; t < r.info().nt; ++t) r.read_rows(t, 0, r.info().ny, f);
  } catch (const InputError& e) {
    return e.what();
  } catch (const std::exception& e) {
    return std::string("unexpected exception type: ") + e.what();
  }
  return "no error";
}

bool contains(const std::string& text, const std::string& part) {
  return text.find(part) != std::string::npos;
}

const seatilt::Attribute* find_attr(const std::vector<seatilt::Attribute>& attrs, const std::string& name) {
  for (const auto& a : attrs)
    if (a.name == name) return &a;
  return nullptr;
}

}  // namespace

TEST_CASE("detection by standard_name in every on-disk format") {
  TempDir dir;
  const std::vector<std::pair<int, std::string>> formats = {
      {0, "classic"},
      {NC_64BIT_OFFSET, "64-bit offset"},
      {NC_64BIT_DATA, "CDF5"},
      {NC_NETCDF4, "netCDF-4"},
      {NC_NETCDF4 | NC_CLASSIC_MODEL, "netCDF-4 classic model"}};
  for (const auto& [cmode, format] : formats) {
    CAPTURE(format);
    const std::string path = dir.file("adt.nc");
    simple_file(path, cmode, "adt", "sea_surface_height_above_geoid");
    Reader r(path, {});
    const auto& info = r.info();
    CHECK(info.format == format);
    CHECK(info.variable == "adt");
    CHECK(info.chosen_because == "standard_name sea_surface_height_above_geoid");
    CHECK(info.kind == HeightKind::absolute);
    CHECK(info.ny == 3);
    CHECK(info.nx == 4);
    CHECK(info.nt == 1);
    CHECK_FALSE(info.time.has_value());
    CHECK(info.lat.name == "lat");
    CHECK(info.lon.values == lon4);  // 0..360 longitudes reported as they are
    CHECK_FALSE(info.packed);
    Field f;
    r.read_rows(0, 1, 2, f);
    REQUIRE(f.ny == 2);
    REQUIRE(f.nx == 4);
    for (std::size_t j = 0; j < 2; ++j)
      for (std::size_t i = 0; i < 4; ++i)
        CHECK(f.at(j, i) == 0.25 * static_cast<double>((j + 1) * 4 + i));  // 0.25 k exact in float
  }
}

TEST_CASE("anomaly names and the --variable choice") {
  TempDir dir;
  const std::string path = dir.file("two.nc");
  {
    NcBuilder b(path, NC_NETCDF4);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int adt = b.var("adt", NC_FLOAT, {dy, dx});
    b.text(adt, "standard_name", "sea_surface_height_above_geoid");
    b.text(adt, "units", "m");
    const int sla = b.var("sla", NC_FLOAT, {dy, dx});
    b.text(sla, "standard_name", "sea_surface_height_above_sea_level");
    b.text(sla, "units", "m");
    b.enddef();
    b.put_latlon();
  }
  SUBCASE("two CF height names are ambiguous") {
    const std::string e = error_of(path);
    CHECK(contains(e, path + ": "));
    CHECK(contains(e, "adt (sea_surface_height_above_geoid)"));
    CHECK(contains(e, "sla (sea_surface_height_above_sea_level)"));
    CHECK(contains(e, "--variable"));
    CHECK_FALSE(contains(e, "\n"));
  }
  SUBCASE("--variable picks one; the standard_name sets the kind") {
    ReaderOptions o;
    o.variable = "sla";
    Reader r(path, o);
    CHECK(r.info().variable == "sla");
    CHECK(r.info().chosen_because == "--variable");
    CHECK(r.info().kind == HeightKind::anomaly);
  }
  SUBCASE("--variable naming an absent variable") {
    ReaderOptions o;
    o.variable = "zeta";
    const std::string e = error_of(path, o);
    CHECK(contains(e, path + ": variable zeta: not found"));
    CHECK(contains(e, "adt"));
  }
}

TEST_CASE("every CF height standard name sets absolute or anomaly") {
  TempDir dir;
  const std::vector<std::pair<std::string, HeightKind>> names = {
      {"sea_surface_height_above_geoid", HeightKind::absolute},
      {"sea_surface_height_above_geopotential_datum", HeightKind::absolute},
      {"sea_surface_height_above_mean_sea_level", HeightKind::anomaly},
      {"sea_surface_height_above_sea_level", HeightKind::anomaly},
      {"sea_surface_height", HeightKind::anomaly}};
  for (const auto& [sn, kind] : names) {
    CAPTURE(sn);
    const std::string path = dir.file("h.nc");
    simple_file(path, 0, "h", sn);
    Reader r(path, {});
    CHECK(r.info().kind == kind);
    CHECK(r.info().standard_name == sn);
  }
}

TEST_CASE("no CF height name: the error lists the candidates") {
  TempDir dir;
  const std::string path = dir.file("plain.nc");
  simple_file(path, 0, "zeta", "");
  const std::string e = error_of(path);
  CHECK(contains(e, path + ": no variable has a CF sea-surface-height standard_name"));
  CHECK(contains(e, "candidates on latitude/longitude dimensions: zeta"));
  CHECK(contains(e, "--variable"));
  CHECK_FALSE(contains(e, "\n"));

  ReaderOptions o;
  o.variable = "zeta";
  Reader r(path, o);
  CHECK(r.info().kind == HeightKind::absolute);
  CHECK(contains(r.info().kind_reason, "assumed absolute"));

  const std::string sla = dir.file("sla.nc");
  simple_file(sla, 0, "sla", "");
  o.variable = "sla";
  Reader a(sla, o);
  CHECK(a.info().kind == HeightKind::anomaly);

  const std::string none = dir.file("none.nc");
  {
    NcBuilder b(none, 0);
    const int d = b.dim("n", 3);
    b.var("depth", NC_FLOAT, {d});
  }
  CHECK(contains(error_of(none), "no height variable"));
}

TEST_CASE("the ellipsoidal height is refused with an explanation") {
  TempDir dir;
  const std::string path = dir.file("ell.nc");
  simple_file(path, 0, "ssh", "sea_surface_height_above_reference_ellipsoid");
  const std::string e = error_of(path);
  CHECK(contains(e, path + ": variable ssh: standard_name sea_surface_height_above_reference_ellipsoid is refused"));
  CHECK(contains(e, "geoid"));
  ReaderOptions o;
  o.variable = "ssh";
  CHECK(contains(error_of(path, o), "refused"));
}

TEST_CASE("packed int16 in cm with _FillValue is unpacked and converted to metres") {
  TempDir dir;
  const std::string path = dir.file("packed.nc");
  const std::vector<double> raw = {-32768, -1000, 0, 1, 250, 32767, -5, 7, 100, 12345, -12345, 3};
  {
    NcBuilder b(path, NC_NETCDF4);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int v = b.var("sla", NC_SHORT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_sea_level");
    b.text(v, "units", "cm");
    b.number(v, "_FillValue", NC_SHORT, {-32768});
    b.number(v, "scale_factor", NC_DOUBLE, {0.1});
    b.number(v, "add_offset", NC_DOUBLE, {2.5});
    b.enddef();
    b.put_latlon();
    b.put(v, raw);
  }
  Reader r(path, {});
  const auto& info = r.info();
  CHECK(info.packed);
  CHECK(info.storage_type == NC_SHORT);
  CHECK(info.scale_factor == 0.1);
  CHECK(info.add_offset == 2.5);
  REQUIRE(info.fill_value.has_value());
  CHECK(*info.fill_value == -32768.0);
  CHECK(info.to_metres_scale == doctest::Approx(0.01).epsilon(1e-15));  // UDUNITS: 1 cm = 0.01 m
  CHECK(info.to_metres_offset == 0.0);
  Field f;
  r.read_rows(0, 0, 3, f);
  CHECK(std::isnan(f.data[0]));
  for (std::size_t k = 1; k < raw.size(); ++k) {
    CAPTURE(k);
    // CF 8.1: unpacked = raw * scale_factor + add_offset (cm), then cm -> m.
    const double expected = (raw[k] * 0.1 + 2.5) * 0.01;
    CHECK(f.data[k] == doctest::Approx(expected).epsilon(1e-15));
  }
  // Row bands read only their rows.
  Field band;
  r.read_rows(0, 2, 1, band);
  REQUIRE(band.data.size() == 4);
  CHECK(band.data[3] == doctest::Approx((3 * 0.1 + 2.5) * 0.01).epsilon(1e-15));
}

TEST_CASE("_Unsigned byte storage and the default fill value") {
  TempDir dir;
  const std::string path = dir.file("unsigned.nc");
  {
    NcBuilder b(path, 0);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int v = b.var("h", NC_BYTE, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "mm");
    b.text(v, "_Unsigned", "true");
    b.number(v, "_FillValue", NC_BYTE, {-1});  // 255 as unsigned
    b.enddef();
    b.put_latlon();
    b.put(v, {-1, -2, 0, 1, 127, -128, 5, 6, 7, 8, 9, 10});
  }
  Reader r(path, {});
  Field f;
  r.read_rows(0, 0, 3, f);
  CHECK(std::isnan(f.data[0]));
  CHECK(f.data[1] == doctest::Approx(0.254));  // 254 mm (NUG _Unsigned convention)
  CHECK(f.data[4] == doctest::Approx(0.127));
  CHECK(f.data[5] == doctest::Approx(0.128));  // -128 stored = 128 unsigned

  const std::string deffill = dir.file("deffill.nc");
  {
    NcBuilder b(deffill, NC_NETCDF4);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int v = b.var("h", NC_FLOAT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put_latlon();
    // netCDF default float fill (netcdf.h NC_FILL_FLOAT) where no _FillValue exists.
    std::vector<double> values(12, 1.5);
    values[7] = static_cast<double>(NC_FILL_FLOAT);
    b.put(v, values);
  }
  Reader d(deffill, {});
  d.read_rows(0, 0, 3, f);
  CHECK(std::isnan(f.data[7]));
  CHECK(f.data[6] == 1.5);
}

TEST_CASE("missing_value, valid_range, valid_min/valid_max and NaN in the data") {
  TempDir dir;
  const std::string path = dir.file("valid.nc");
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const double inf = std::numeric_limits<double>::infinity();
  const std::vector<double> values = {1.0, -999.0, 6.0, -6.0, nan, 5.0, -5.0, inf, 0.1, -0.1, 4.5, 0.0};
  {
    NcBuilder b(path, 0);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int v = b.var("h", NC_FLOAT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.number(v, "missing_value", NC_FLOAT, {-999.0});
    b.number(v, "valid_range", NC_DOUBLE, {-5.0, 5.0});
    const int w = b.var("w", NC_DOUBLE, {dy, dx});
    b.text(w, "units", "m");
    b.number(w, "valid_min", NC_DOUBLE, {0.0});
    b.number(w, "valid_max", NC_DOUBLE, {4.5});
    b.enddef();
    b.put_latlon();
    b.put_float(v, values);
    b.put(w, values);
  }
  Reader r(path, {});
  Field f;
  r.read_rows(0, 0, 3, f);
  // The range is inclusive at both ends (CF 2.5.1).
  const std::vector<bool> missing = {false, true, true, true, true, false, false, true, false, false, false, false};
  for (std::size_t k = 0; k < values.size(); ++k) {
    CAPTURE(k);
    CHECK(std::isnan(f.data[k]) == missing[k]);
    if (!missing[k]) CHECK(f.data[k] == static_cast<double>(static_cast<float>(values[k])));
  }
  ReaderOptions o;
  o.variable = "w";
  Reader w(path, o);
  w.read_rows(0, 0, 3, f);
  const std::vector<bool> missing_w = {false, true, true, true, true, true, true, true, false, true, false, false};
  for (std::size_t k = 0; k < values.size(); ++k) {
    CAPTURE(k);
    CHECK(std::isnan(f.data[k]) == missing_w[k]);
  }
}

TEST_CASE("descending latitude, axis attributes and leading size-1 dimensions") {
  TempDir dir;
  const std::string path = dir.file("desc.nc");
  {
    NcBuilder b(path, NC_NETCDF4);
    const int dz = b.dim("depth", 1);
    const int dy = b.dim("y", 3);
    const int dx = b.dim("x", 2);
    const int lat = b.var("latitude", NC_FLOAT, {dy});
    b.text(lat, "standard_name", "latitude");
    const int lon = b.var("longitude", NC_FLOAT, {dx});
    b.text(lon, "axis", "X");
    b.text(lon, "units", "degree");
    const int v = b.var("zos", NC_DOUBLE, {dz, dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put(lat, {30.0, 20.0, 10.0});
    b.put(lon, {-180.0, 179.0});
    b.put(v, {1, 2, 3, 4, 5, 6});
  }
  Reader r(path, {});
  CHECK(r.info().lat.values == std::vector<double>{30.0, 20.0, 10.0});
  CHECK(r.info().lat.dim == "y");
  CHECK(r.info().lon.name == "longitude");
  CHECK(r.info().lon.values == std::vector<double>{-180.0, 179.0});
  Field f;
  r.read_rows(0, 0, 1, f);  // first row = northernmost (file order kept)
  CHECK(f.data == std::vector<double>{1.0, 2.0});
  r.read_rows(0, 1, 2, f);
  CHECK(f.data == std::vector<double>{3.0, 4.0, 5.0, 6.0});
  CHECK_THROWS_AS(r.read_rows(0, 2, 2, f), std::out_of_range);
  CHECK_THROWS_AS(r.read_rows(1, 0, 1, f), std::out_of_range);
  CHECK_THROWS_AS((void)r.date(0), InputError);
}

TEST_CASE("time values, attributes and calendar are copied; rows of a later step") {
  TempDir dir;
  const std::string path = dir.file("time.nc");
  {
    NcBuilder b(path, 0);
    const int dt = b.dim("time", NC_UNLIMITED);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int t = b.var("time", NC_DOUBLE, {dt});
    b.text(t, "units", "days since 2000-01-01 00:00:00");
    b.text(t, "calendar", "noleap");
    b.text(t, "long_name", "model time");
    const int v = b.var("ssh", NC_FLOAT, {dt, dy, dx});
    b.text(v, "standard_name", "sea_surface_height");
    b.text(v, "units", "m");
    b.text(v, "long_name", "sea surface height");
    b.enddef();
    b.put_latlon();
    const std::size_t start[1] = {0}, count[1] = {2};
    const double tv[2] = {59.0, 59.5};
    NC(nc_put_vara_double(b.id(), t, start, count, tv));
    std::vector<double> data(24);
    for (std::size_t k = 0; k < data.size(); ++k) data[k] = static_cast<double>(k);
    const std::size_t s3[3] = {0, 0, 0}, c3[3] = {2, 3, 4};
    NC(nc_put_vara_double(b.id(), v, s3, c3, data.data()));
  }
  Reader r(path, {});
  const auto& info = r.info();
  REQUIRE(info.time.has_value());
  CHECK(info.nt == 2);
  CHECK(info.time->name == "time");
  CHECK(info.time->dim == "time");
  CHECK(info.time->nc_type == NC_DOUBLE);
  CHECK(info.time->values == std::vector<double>{59.0, 59.5});
  const auto* units = find_attr(info.time->attrs, "units");
  REQUIRE(units != nullptr);
  CHECK(units->text == "days since 2000-01-01 00:00:00");
  const auto* ln = find_attr(info.time->attrs, "long_name");
  REQUIRE(ln != nullptr);
  CHECK(ln->text == "model time");
  CHECK(info.calendar == "noleap");
  CHECK(info.long_name == "sea surface height");
  CHECK(find_attr(info.variable_attrs, "standard_name") != nullptr);
  // noleap: day 59 after 2000-01-01 is 2000-03-01 (cftime 1.6.2: num2date(59, ..., 'noleap')).
  CHECK(r.date(0).iso() == "2000-03-01T00:00:00Z");
  CHECK(r.date(1).iso() == "2000-03-01T12:00:00Z");
  Field f;
  r.read_rows(1, 1, 2, f);
  CHECK(f.data.front() == 16.0);
  CHECK(f.data.back() == 23.0);
}

TEST_CASE("decode_cf_time against cftime 1.6.2") {
  struct Case {
    double value;
    const char* units;
    const char* calendar;
    const char* iso;
  };
  // Expected values: cftime 1.6.2, num2date(value, units, calendar=...), printed
  // with strftime('%Y-%m-%dT%H:%M:%S'); years before 1 follow cftime's default
  // (no year 0 in standard/julian, year 0 in proleptic_gregorian).
  const Case cases[] = {
      {395.5, "days since 2000-01-01", "360_day", "2001-02-06T12:00:00Z"},
      {1446, "hours since 1999-12-31 18:00:00", "noleap", "2000-03-02T00:00:00Z"},
      {1446, "hours since 1999-12-31 18:00:00", "365_day", "2000-03-02T00:00:00Z"},
      {10, "days since 1582-10-01", "julian", "1582-10-11T00:00:00Z"},
      {10, "days since 1582-10-01", "standard", "1582-10-21T00:00:00Z"},
      {-1, "days since 1582-10-15", "standard", "1582-10-04T00:00:00Z"},
      {-1, "days since 1582-10-15", "gregorian", "1582-10-04T00:00:00Z"},
      {10, "days since 1582-10-01", "proleptic_gregorian", "1582-10-11T00:00:00Z"},
      {1, "days since 2001-02-28", "all_leap", "2001-02-29T00:00:00Z"},
      {1, "days since 2001-02-28", "366_day", "2001-02-29T00:00:00Z"},
      {1e9, "seconds since 1970-01-01T00:00:00Z", "standard", "2001-09-09T01:46:40Z"},
      {-90061, "minutes since 1950-1-1 0:0:0", "standard", "1949-10-30T10:59:00Z"},
      {-1, "days since 0001-01-01", "standard", "-0001-12-31T00:00:00Z"},
      {-1, "days since 0001-01-01", "julian", "-0001-12-31T00:00:00Z"},
      {-1, "days since 0001-01-01", "proleptic_gregorian", "0000-12-31T00:00:00Z"},
      {25567.25, "days since 1950-01-01", "standard", "2020-01-01T06:00:00Z"},
      {0, "days since 2000-01-01 00:00:00 +06:00", "standard", "1999-12-31T18:00:00Z"},
      {0, "days since 2000-01-01 06:30 -02:30", "proleptic_gregorian", "2000-01-01T09:00:00Z"},
      {730.75, "d since 1900-03-01", "360_day", "1902-03-11T18:00:00Z"},
      {100000, "hr since 1700-02-28 12:00", "noleap", "1711-07-30T04:00:00Z"},
      {-2451545.0, "days since 2000-01-01 12:00:00", "julian", "-4713-01-14T12:00:00Z"},
      {-152384.0, "days since 1582-10-15", "standard", "1165-07-22T00:00:00Z"},
  };
  for (const auto& c : cases) {
    CAPTURE(c.units);
    CAPTURE(c.calendar);
    CHECK(decode_cf_time(c.value, c.units, c.calendar).iso() == c.iso);
  }
  // cftime 1.6.2: 3.5 sec since 2020-12-31 23:59:58 -> 2021-01-01 00:00:01.500000.
  const CivilTime t = decode_cf_time(3.5, "sec since 2020-12-31 23:59:58", "standard");
  CHECK(t.year == 2021);
  CHECK(t.month == 1);
  CHECK(t.day == 1);
  CHECK(t.second == doctest::Approx(1.5));
  // An empty calendar means "standard" (CF 4.4.1 default).
  CHECK(decode_cf_time(10, "days since 1582-10-01", "").iso() == "1582-10-21T00:00:00Z");

  CHECK_THROWS_AS(decode_cf_time(1, "months since 2000-01-01", "standard"), std::invalid_argument);
  CHECK_THROWS_AS(decode_cf_time(1, "years since 2000-01-01", "standard"), std::invalid_argument);
  CHECK_THROWS_AS(decode_cf_time(1, "days since 2000-01-01", "none"), std::invalid_argument);
  CHECK_THROWS_AS(decode_cf_time(1, "days after 2000-01-01", "standard"), std::invalid_argument);
  CHECK_THROWS_AS(decode_cf_time(1, "days since 1582-10-10", "standard"), std::invalid_argument);
  CHECK_THROWS_AS(decode_cf_time(1, "days since 2001-02-29", "noleap"), std::invalid_argument);
  CHECK_NOTHROW(decode_cf_time(1, "days since 2001-02-30", "360_day"));
}

TEST_CASE("units: non-length and missing units are errors; --units overrides") {
  TempDir dir;
  const std::string speed = dir.file("speed.nc");
  simple_file(speed, 0, "h", "sea_surface_height_above_geoid", "m s-1");
  std::string e = error_of(speed);
  CHECK(contains(e, speed + ": variable h: units \"m s-1\" are not a length"));
  CHECK(contains(e, "--units"));

  const std::string nounits = dir.file("nounits.nc");
  simple_file(nounits, 0, "h", "sea_surface_height_above_geoid", "");
  e = error_of(nounits);
  CHECK(contains(e, "has no units attribute"));
  CHECK(contains(e, "--units"));

  const std::string gpm = dir.file("gpm.nc");
  simple_file(gpm, 0, "h", "sea_surface_height_above_geoid", "geopotential meters!");
  CHECK(contains(error_of(gpm), "not understood by UDUNITS-2"));

  ReaderOptions o;
  o.units = " mm ";
  Reader r(gpm, o);
  CHECK(r.info().units == "mm");
  CHECK(r.info().units_overridden);
  Field f;
  r.read_rows(0, 0, 3, f);
  CHECK(f.data[4] == doctest::Approx(0.001));  // 1 mm = 0.001 m (UDUNITS-2, SI prefix)

  const std::string feet = dir.file("feet.nc");
  simple_file(feet, 0, "h", "sea_surface_height_above_geoid", "ft");
  Reader ft(feet, {});
  CHECK(ft.info().to_metres_scale == doctest::Approx(0.3048).epsilon(1e-15));  // international foot, exact by definition
}

TEST_CASE("files that are not netCDF or are truncated give an InputError") {
  TempDir dir;
  const std::string text = dir.file("text.nc");
  std::ofstream(text) << "this is not a netCDF file\n";
  CHECK(contains(error_of(text), text + ": cannot be opened as netCDF"));
  CHECK(contains(error_of(dir.file("absent.nc")), "cannot be opened as netCDF"));
  const std::string empty = dir.file("empty.nc");
  std::ofstream(empty).close();
  CHECK(contains(error_of(empty), empty + ": "));

  for (int cmode : {0, NC_NETCDF4}) {
    CAPTURE(cmode);
    const std::string path = dir.file("big.nc");
    {
      NcBuilder b(path, cmode);
      std::vector<double> lat(200), lon(300);
      for (std::size_t k = 0; k < lat.size(); ++k) lat[k] = -80.0 + 0.5 * static_cast<double>(k);
      for (std::size_t k = 0; k < lon.size(); ++k) lon[k] = 0.5 * static_cast<double>(k);
      auto [dy, dx] = b.latlon(lat, lon);
      const int v = b.var("adt", NC_DOUBLE, {dy, dx});
      b.text(v, "standard_name", "sea_surface_height_above_geoid");
      b.text(v, "units", "m");
      b.enddef();
      b.put_latlon();
      std::vector<double> data(lat.size() * lon.size());
      for (std::size_t k = 0; k < data.size(); ++k) data[k] = std::sin(static_cast<double>(k));
      b.put(v, data);
    }
    const auto size = fs::file_size(path);
    if (cmode == 0) {
      // netCDF-C reads past the end of a classic file without an error; the
      // reader compares the size with the header (last value ends the file here).
      fs::resize_file(path, size - 1);
      CHECK(contains(error_of(path), path + ": file is truncated"));
    }
    fs::resize_file(path, size / 2);
    const std::string e = error_of(path);
    CHECK(contains(e, path + ": "));
    CHECK_FALSE(contains(e, "unexpected"));
    CHECK_FALSE(contains(e, "no error"));
  }
}

TEST_CASE("time decoding errors name the time variable") {
  TempDir dir;
  const std::string path = dir.file("months.nc");
  {
    NcBuilder b(path, 0);
    const int dt = b.dim("t", 2);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int t = b.var("t", NC_DOUBLE, {dt});
    b.text(t, "units", "months since 2000-01-01");
    b.text(t, "calendar", "360_day");
    const int v = b.var("ssh", NC_FLOAT, {dt, dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put_latlon();
    b.put(t, {0.0, 1.0});
  }
  Reader r(path, {});
  CHECK(r.info().nt == 2);
  CHECK(r.info().calendar == "360_day");
  try {
    (void)r.date(1);
    FAIL("no exception");
  } catch (const InputError& e) {
    CHECK(contains(e.what(), path + ": variable t: time unit \"months\" is ambiguous"));
  }
  CHECK_THROWS_AS((void)r.date(2), std::out_of_range);
}

TEST_CASE("coordinates must be strictly monotonic and non-empty") {
  TempDir dir;
  const std::string path = dir.file("nonmono.nc");
  {
    NcBuilder b(path, 0);
    auto [dy, dx] = b.latlon({0.0, 10.0, 5.0}, lon4);
    const int v = b.var("adt", NC_FLOAT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put_latlon();
  }
  const std::string e = error_of(path);
  CHECK(contains(e, path + ": variable lat: coordinate is not strictly monotonic"));

  const std::string repeated = dir.file("repeated.nc");
  {
    NcBuilder b(repeated, 0);
    auto [dy, dx] = b.latlon(lat3, {0.0, 1.0, 1.0, 2.0});
    const int v = b.var("adt", NC_FLOAT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put_latlon();
  }
  CHECK(contains(error_of(repeated), "variable lon: coordinate is not strictly monotonic"));

  const std::string empty = dir.file("emptydim.nc");
  {
    NcBuilder b(empty, NC_NETCDF4);
    auto [dy, dx] = b.latlon({}, lon4);
    const int v = b.var("adt", NC_FLOAT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
  }
  CHECK(contains(error_of(empty), "variable lat: dimension lat is empty"));
}

TEST_CASE("unsupported dimension orders are rejected naming the dimensions") {
  TempDir dir;
  const std::string path = dir.file("lonlat.nc");
  {
    NcBuilder b(path, 0);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int v = b.var("adt", NC_FLOAT, {dx, dy});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put_latlon();
  }
  const std::string e = error_of(path);
  CHECK(contains(e, path + ": variable adt: unsupported dimension order (lon=4, lat=3)"));

  const std::string extra = dir.file("extra.nc");
  {
    NcBuilder b(extra, 0);
    const int dz = b.dim("depth", 2);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int v = b.var("adt", NC_FLOAT, {dz, dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put_latlon();
  }
  const std::string e2 = error_of(extra);
  CHECK(contains(e2, "unsupported dimensions (depth=2, lat=3, lon=4): depth has size 2 and is not time"));
}

// ---- hardening (issue #9, docs/hardening.md) ----------------------------------------

namespace {
std::vector<char> bytes_of(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  return std::vector<char>(std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>());
}
void write_bytes(const std::string& path, const std::vector<char>& b) {
  std::ofstream(path, std::ios::binary).write(b.data(), static_cast<std::streamsize>(b.size()));
}
std::string memory_error_of(const std::vector<char>& b) {
  try {
    Reader r = Reader::from_memory("mem.nc", b.data(), b.size(), {});
    Field f;
    r.read_rows(0, 0, r.info().ny, f);
  } catch (const InputError& e) {
    return e.what();
  } catch (const std::exception& e) {
    return std::string("unexpected exception type: ") + e.what();
  }
  return "no error";
}
}  // namespace

TEST_CASE("from_memory detects and reads exactly as from a file, in every format") {
  TempDir dir;
  for (int cmode : {0, NC_64BIT_OFFSET, NC_64BIT_DATA, NC_NETCDF4, NC_NETCDF4 | NC_CLASSIC_MODEL}) {
    CAPTURE(cmode);
    const std::string path = dir.file("m.nc");
    simple_file(path, cmode, "zos", "sea_surface_height_above_mean_sea_level", "cm");
    Reader disk(path, {});
    const std::vector<char> b = bytes_of(path);
    Reader mem = Reader::from_memory("copy.nc", b.data(), b.size(), {});
    CHECK(mem.info().path == "copy.nc");
    CHECK(mem.info().variable == "zos");
    CHECK(mem.info().format == disk.info().format);
    CHECK(mem.info().to_metres_scale == disk.info().to_metres_scale);
    CHECK(mem.info().lat.values == disk.info().lat.values);
    CHECK(mem.read_path() == "netCDF-C (in memory)");
    Field a, c;
    disk.read_rows(0, 0, 3, a);
    mem.read_rows(0, 0, 3, c);
    CHECK(a.data == c.data);
  }
  CHECK(contains(memory_error_of({}), "mem.nc: cannot be opened as netCDF (no bytes)"));
  CHECK(contains(memory_error_of({'n', 'o', 'p', 'e'}), "mem.nc: cannot be opened as netCDF"));
}

TEST_CASE("a classic header with impossible lengths is refused before netCDF-C parses it") {
  // netCDF-C 4.9.0 (ncdump too) aborts on a CDF-5 name length of 2^64 - 1
  // (fuzz/fuzz_metadata finding); the header walk refuses it first.
  TempDir dir;
  const std::string path = dir.file("cdf5.nc");
  simple_file(path, NC_64BIT_DATA, "adt", "sea_surface_height_above_geoid");
  std::vector<char> b = bytes_of(path);
  // CDF-5 header: magic(4) numrecs(8) NC_DIMENSION(4) at 12, count(8), then the first
  // dimension's name length (8 bytes, big-endian) at offset 24.
  REQUIRE(b.size() > 40);
  CHECK(b[15] == 0x0A);
  for (std::size_t k = 24; k < 32; ++k) b[k] = static_cast<char>(0xFF);
  write_bytes(path, b);
  CHECK(contains(error_of(path), path + ": cannot be opened as netCDF (malformed classic header: "
                                        "a dimension name has length 18446744073709551615)"));
  CHECK(contains(memory_error_of(b), "malformed classic header"));

  // CDF-1: an attribute claiming more values than the file holds.
  const std::string one = dir.file("cdf1.nc");
  {
    NcBuilder nb(one, 0);
    nb.text(NC_GLOBAL, "title", "abc");
  }
  std::vector<char> c = bytes_of(one);
  // magic(4) numrecs(4) ABSENT dims(8) NC_ATTRIBUTE(4) count(4) name len(4)
  // "titl"... "e" padded (8) type(4) nelems(4) at offset 40.
  REQUIRE(c.size() >= 48);
  CHECK(c[43] == 3);
  c[40] = 0x7F;
  write_bytes(one, c);
  CHECK(contains(error_of(one), "malformed classic header: an attribute's values run past the end"));
  // The unmodified layouts of every classic flavour pass the walk (above and
  // in every other test of this file).
}

TEST_CASE("coordinate packing attributes that are not one finite number are InputErrors") {
  TempDir dir;
  for (const char* bad : {"text", "empty", "nan"}) {
    CAPTURE(bad);
    const std::string path = dir.file("c.nc");
    {
      NcBuilder b(path, NC_NETCDF4);
      auto [dy, dx] = b.latlon(lat3, lon4);
      if (std::string(bad) == "text") b.text(0, "scale_factor", "two");
      if (std::string(bad) == "empty") b.number(0, "scale_factor", NC_DOUBLE, {});
      if (std::string(bad) == "nan") b.number(1, "add_offset", NC_DOUBLE, {std::nan("")});
      const int v = b.var("adt", NC_FLOAT, {dy, dx});
      b.text(v, "standard_name", "sea_surface_height_above_geoid");
      b.text(v, "units", "m");
      b.enddef();
      b.put_latlon();
      b.put(v, std::vector<double>(12, 0.5));
    }
    // Before issue #9 a text scale_factor escaped as std::out_of_range (exit 70).
    const std::string e = error_of(path);
    CHECK(contains(e, std::string("variable ") + (std::string(bad) == "nan" ? "lon" : "lat") +
                          ": attribute "));
    CHECK(contains(e, "is not a finite number"));
  }
}

TEST_CASE("text from the file is shown printable: control bytes and bad UTF-8 as '?'") {
  TempDir dir;
  const std::string path = dir.file("u.nc");
  // "m", an invalid byte, ESC "[31m", a valid UTF-8 degree sign, an overlong "/".
  simple_file(path, 0, "adt", "sea_surface_height_above_geoid",
              "m\xff\x1b[31m \xc2\xb0 \xc0\xaf");
  const std::string e = error_of(path);
  CHECK(contains(e, "units \"m??[31m \xc2\xb0 ??\" not understood by UDUNITS-2"));
}

TEST_CASE("a netCDF-4 height variable never written is refused at the first read") {
  TempDir dir;
  const std::string path = dir.file("empty4.nc");
  {
    NcBuilder b(path, NC_NETCDF4);
    auto [dy, dx] = b.latlon(lat3, lon4);
    const int v = b.var("adt", NC_FLOAT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
    b.enddef();
    b.put_latlon();
  }
  Reader r(path, {});  // detection alone does not read the data
  CHECK(r.info().ny == 3);
  Field f;
  CHECK_THROWS_WITH_AS(r.read_rows(0, 0, 1, f),
                       doctest::Contains("variable adt: holds no data: none of its 1 x 3 x 4"),
                       InputError);
}

TEST_CASE("an input modified in place while read is refused; one replaced by rename is not") {
  TempDir dir;
  const std::string path = dir.file("live.nc");
  simple_file(path, 0, "adt", "sea_surface_height_above_geoid");
  Field f;
  {
    Reader r(path, {});
    r.read_rows(0, 0, 3, f);
    std::ofstream(path, std::ios::binary | std::ios::app) << "more";  // grows in place
    CHECK_THROWS_WITH_AS(r.read_rows(0, 0, 3, f),
                         doctest::Contains("the file changed while it was being read (its size "
                                           "went from"),
                         InputError);
  }
  {
    simple_file(path, 0, "adt", "sea_surface_height_above_geoid");
    Reader r(path, {});
    const std::string other = dir.file("other.nc");
    simple_file(other, 0, "adt", "sea_surface_height_above_geoid");
    fs::rename(other, path);  // a new inode at the path; the opened file is unchanged
    r.read_rows(0, 0, 3, f);
    CHECK(f.at(2, 3) == 0.25 * 11);
  }
}

TEST_CASE("declared coordinates larger than the available memory are refused before reading") {
  TempDir dir;
  const std::string path = dir.file("huge.nc");
  {
    NcBuilder b(path, NC_NETCDF4);
    const int dy = b.dim("lat", std::size_t{1} << 33);
    const int dx = b.dim("lon", 4);
    const int la = b.var("lat", NC_DOUBLE, {dy});
    b.text(la, "units", "degrees_north");
    const int lo = b.var("lon", NC_DOUBLE, {dx});
    b.text(lo, "units", "degrees_east");
    const int v = b.var("adt", NC_FLOAT, {dy, dx});
    b.text(v, "standard_name", "sea_surface_height_above_geoid");
    b.text(v, "units", "m");
  }
  ::setenv("SEATILT_MAX_MEMORY_MB", "1024", 1);
  const std::string e = error_of(path);
  ::unsetenv("SEATILT_MAX_MEMORY_MB");
  CHECK(contains(e, path + ": variable lat: coordinate lat of 8589934592 declared values would "
                           "need about 256.0 GiB, more than the 1.0 GiB available "
                           "(SEATILT_MAX_MEMORY_MB)"));
}
