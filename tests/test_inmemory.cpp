#include "seatilt/inmemory.hpp"

#include <doctest/doctest.h>
#include <netcdf.h>
#include <omp.h>
#include <unistd.h>

#include <cmath>
#include <cstring>
#include <filesystem>
#include <limits>
#include <string>
#include <vector>

#include "analytic.hpp"
#include "seatilt/error.hpp"
#include "seatilt/product.hpp"
#include "seatilt/tiling.hpp"

using namespace seatilt;
namespace fs = std::filesystem;

namespace {
constexpr double deg = 3.14159265358979323846 / 180;
constexpr float fill = -999.f;

void nc_ok(int status) { REQUIRE_MESSAGE(status == NC_NOERR, nc_strerror(status)); }

struct TempDir {
  fs::path path;
  TempDir() {
    char tmpl[] = "/tmp/seatilt-test-inmemory-XXXXXX";
    path = mkdtemp(tmpl);
  }
  ~TempDir() { fs::remove_all(path); }
};

/// Two analytic eddies (tests/analytic.hpp) with a land block on a grid with
/// descending latitude: NT x NY x NX float32 heights in metres, FILL on land.
struct Scene {
  std::size_t nt, ny, nx;
  std::vector<double> lat, lon;
  std::vector<float> h;
  Scene(std::size_t steps, std::size_t rows, std::size_t cols) : nt(steps), ny(rows), nx(cols) {
    for (std::size_t j = 0; j < ny; ++j) lat.push_back(45.0 - 0.1 * static_cast<double>(j));
    for (std::size_t i = 0; i < nx; ++i) lon.push_back(10.0 + 0.1 * static_cast<double>(i));
    analytic::Eddy a, b;
    a.p0 = 42 * deg;
    a.l0 = 13 * deg;
    b.p0 = 38 * deg;
    b.l0 = 16 * deg;
    b.A = -0.15;
    for (std::size_t k = 0; k < nt; ++k)
      for (std::size_t j = 0; j < ny; ++j)
        for (std::size_t i = 0; i < nx; ++i) {
          const double p = lat[j] * deg, l = (lon[i] + 0.05 * static_cast<double>(k)) * deg;
          const bool land = j > ny / 3 && j < ny / 2 && i > nx / 4 && i < nx / 3;
          h.push_back(land ? fill : static_cast<float>(a.eta(p, l) + b.eta(p, l)));
        }
  }
  /// Writes the scene as a CF netCDF-4 height file (float32 metres, _FillValue FILL).
  void write(const std::string& path) const {
    int nc = 0, dt = 0, dy = 0, dx = 0, vt = 0, vy = 0, vx = 0, vh = 0;
    nc_ok(nc_create(path.c_str(), NC_NETCDF4 | NC_CLOBBER, &nc));
    nc_ok(nc_def_dim(nc, "time", nt, &dt));
    nc_ok(nc_def_dim(nc, "lat", ny, &dy));
    nc_ok(nc_def_dim(nc, "lon", nx, &dx));
    nc_ok(nc_def_var(nc, "time", NC_DOUBLE, 1, &dt, &vt));
    nc_ok(nc_put_att_text(nc, vt, "units", 22, "days since 1950-01-01"));
    nc_ok(nc_def_var(nc, "lat", NC_DOUBLE, 1, &dy, &vy));
    nc_ok(nc_put_att_text(nc, vy, "units", 13, "degrees_north"));
    nc_ok(nc_def_var(nc, "lon", NC_DOUBLE, 1, &dx, &vx));
    nc_ok(nc_put_att_text(nc, vx, "units", 12, "degrees_east"));
    const int dims[3] = {dt, dy, dx};
    nc_ok(nc_def_var(nc, "zeta_surface", NC_FLOAT, 3, dims, &vh));
    const std::string sn = "sea_surface_height_above_geoid";
    nc_ok(nc_put_att_text(nc, vh, "standard_name", sn.size(), sn.c_str()));
    nc_ok(nc_put_att_text(nc, vh, "units", 1, "m"));
    nc_ok(nc_put_att_float(nc, vh, "_FillValue", NC_FLOAT, 1, &fill));
    nc_ok(nc_enddef(nc));
    std::vector<double> t(nt);
    for (std::size_t k = 0; k < nt; ++k) t[k] = 27000.0 + static_cast<double>(k);
    nc_ok(nc_put_var_double(nc, vt, t.data()));
    nc_ok(nc_put_var_double(nc, vy, lat.data()));
    nc_ok(nc_put_var_double(nc, vx, lon.data()));
    nc_ok(nc_put_var_float(nc, vh, h.data()));
    nc_ok(nc_close(nc));
  }
  /// A contiguous float32 view of the heights, fill as missing.
  HeightArray view() const {
    HeightArray a;
    a.data = h.data();
    a.type = chunkio::ElementType::f32;
    a.nt = nt;
    a.ny = ny;
    a.nx = nx;
    a.strides[0] = static_cast<std::ptrdiff_t>(ny * nx * sizeof(float));
    a.strides[1] = static_cast<std::ptrdiff_t>(nx * sizeof(float));
    a.strides[2] = sizeof(float);
    return a;
  }
};

/// Values of variable NAME read back from a netCDF file as netCDF-C gives them.
template <class T>
std::vector<T> read_var(const std::string& path, const char* name) {
  int nc = 0, v = 0, nd = 0, dims[NC_MAX_VAR_DIMS];
  nc_ok(nc_open(path.c_str(), NC_NOWRITE, &nc));
  nc_ok(nc_inq_varid(nc, name, &v));
  nc_ok(nc_inq_varndims(nc, v, &nd));
  nc_ok(nc_inq_vardimid(nc, v, dims));
  std::size_t n = 1;
  for (int d = 0; d < nd; ++d) {
    std::size_t len = 0;
    nc_ok(nc_inq_dimlen(nc, dims[d], &len));
    n *= len;
  }
  std::vector<T> out(n);
  if constexpr (std::is_same_v<T, float>)
    nc_ok(nc_get_var_float(nc, v, out.data()));
  else
    nc_ok(nc_get_var_schar(nc, v, out.data()));
  nc_ok(nc_close(nc));
  return out;
}

/// Bits of a float, with every NaN as the file's fill (NC_FILL_FLOAT, netcdf.h).
std::uint32_t file_bits(float f) {
  if (std::isnan(f)) f = NC_FILL_FLOAT;
  std::uint32_t b = 0;
  std::memcpy(&b, &f, sizeof b);
  return b;
}

struct Outputs {
  CurrentsArrays arrays;
  std::vector<std::vector<float>> floats;
  std::vector<std::int8_t> quality;
  Outputs(const std::vector<std::string>& fields, std::size_t cells) {
    arrays.fields = fields;
    for (const std::string& f : fields) {
      if (f == "quality") {
        quality.assign(cells, 0);
        continue;
      }
      floats.emplace_back(cells, 0.f);
    }
    std::size_t k = 0;
    for (const std::string& f : fields)
      arrays.data.push_back(f == "quality" ? static_cast<void*>(quality.data())
                                           : static_cast<void*>(floats[k++].data()));
  }
};

}  // namespace

TEST_CASE("option texts: the command line's values and messages (src/cli/main.cpp, kernel.cpp)") {
  CurrentsOptionText t;
  const CurrentsOptions d = currents_options_from_text(t);
  CHECK(d.order == 2);
  CHECK(d.equator == EquatorMethod::blend);
  CHECK(d.coast == CoastMethod::one_sided);
  CHECK(d.earth == EarthModel::wgs84);
  CHECK(d.gravity == GravityModel::standard);
  t.gravity = "9.81";
  CHECK(currents_options_from_text(t).gravity == GravityModel::constant);
  CHECK(currents_options_from_text(t).gravity_value == 9.81);
  t.gravity = "wgs84";
  CHECK(currents_options_from_text(t).gravity == GravityModel::wgs84);

  const auto message = [](CurrentsOptionText bad) {
    try {
      currents_options_from_text(bad);
    } catch (const UsageError& e) {
      return std::string(e.what());
    }
    return std::string("no error");
  };
  CurrentsOptionText b;
  b.equator = "maybe";
  CHECK(message(b) == "--equator: 'maybe' is not one of mask, beta, blend");
  b = {};
  b.coast = "two-sided";
  CHECK(message(b) == "--coast: 'two-sided' is not one of one-sided, mask");
  b = {};
  b.earth = "flat";
  CHECK(message(b) == "--earth: 'flat' is not one of sphere, wgs84");
  b = {};
  b.gravity = "heavy";
  CHECK(message(b) == "--gravity: 'heavy' is not standard, wgs84 or a number in m s-2");
  b = {};
  b.order = 3;
  CHECK(message(b) == "--order: 3 is not one of 2, 4, 6");
  b = {};
  b.equator_band_deg = 31;
  CHECK(message(b) == "--equator-band: 31.000000 is outside 0..30 degrees");
}

TEST_CASE("CF classification mirrors the reader (CF standard-name table v83, CF 4.1-4.4)") {
  CHECK(classify_height_standard_name("sea_surface_height_above_geoid") ==
        HeightStandardName::absolute);
  CHECK(classify_height_standard_name(" sea_surface_height_above_geopotential_datum ") ==
        HeightStandardName::absolute);
  CHECK(classify_height_standard_name("sea_surface_height_above_sea_level") ==
        HeightStandardName::anomaly);
  CHECK(classify_height_standard_name("sea_surface_height") == HeightStandardName::anomaly);
  CHECK(classify_height_standard_name("sea_surface_height_above_reference_ellipsoid") ==
        HeightStandardName::ellipsoid);
  CHECK(classify_height_standard_name("sea_water_temperature") == HeightStandardName::none);

  CHECK(classify_coordinate("degrees_north", "", "") == CoordinateAxis::latitude);
  CHECK(classify_coordinate("degreesN", "", "") == CoordinateAxis::latitude);
  CHECK(classify_coordinate("", "latitude", "") == CoordinateAxis::latitude);
  CHECK(classify_coordinate("degrees", "", "Y") == CoordinateAxis::latitude);
  CHECK(classify_coordinate("degree_E", "", "") == CoordinateAxis::longitude);
  CHECK(classify_coordinate("m", "", "X") == CoordinateAxis::none);  // projection x, not longitude
  CHECK(classify_coordinate("days since 2000-01-01", "", "") == CoordinateAxis::time);
  CHECK(classify_coordinate("", "", "T") == CoordinateAxis::time);

  CHECK(says_anomaly("Sea Level Anomaly"));
  CHECK(says_anomaly("sla"));
  CHECK(says_anomaly("adt_sla"));
  CHECK_FALSE(says_anomaly("islands"));
  CHECK_FALSE(says_anomaly("adt"));
}

TEST_CASE("length units to metres by UDUNITS-2 (SI: 1 cm = 0.01 m, 1 ft = 0.3048 m)") {
  double s = 0, o = 0;
  std::string why;
  REQUIRE(length_units_to_metres("cm", s, o, why));
  CHECK(s == doctest::Approx(0.01).epsilon(1e-15));
  CHECK(o == 0.0);
  REQUIRE(length_units_to_metres("ft", s, o, why));  // international foot, NIST SP 811
  CHECK(s == doctest::Approx(0.3048).epsilon(1e-15));
  CHECK_FALSE(length_units_to_metres("degC", s, o, why));
  CHECK(why == "not a length");
  CHECK_FALSE(length_units_to_metres("no such unit ###", s, o, why));
  CHECK(why == "not understood by UDUNITS-2");
}

namespace {
VariableDescription var(const std::string& name, std::vector<std::string> dims,
                        std::vector<std::size_t> shape,
                        std::map<std::string, std::string> text = {}) {
  VariableDescription v;
  v.name = name;
  v.dims = std::move(dims);
  v.shape = std::move(shape);
  v.text = std::move(text);
  return v;
}

std::vector<VariableDescription> cf_dataset(const std::string& height_sn) {
  return {var("time", {"time"}, {3}, {{"units", "days since 2030-01-01"}}),
          var("depth", {"depth"}, {1}, {{"units", "m"}}),
          var("lat", {"lat"}, {5}, {{"units", "degrees_north"}}),
          var("lon", {"lon"}, {6}, {{"units", "degrees_east"}}),
          var("adt", {"time", "depth", "lat", "lon"}, {3, 1, 5, 6},
              {{"standard_name", height_sn}, {"units", "cm"}})};
}

std::string input_error_of(const std::vector<VariableDescription>& vars,
                           const std::string& variable = "", const std::string& units = "") {
  try {
    describe_dataset(vars, variable, units, "mem.nc");
  } catch (const InputError& e) {
    return e.what();
  }
  return "no error";
}
}  // namespace

TEST_CASE("describe_dataset: the reader's choice of variable, layout and units") {
  const DatasetLayout l = describe_dataset(cf_dataset("sea_surface_height_above_geoid"), "", "", "mem.nc");
  CHECK(l.height == 4);
  CHECK(l.chosen_because == "standard_name sea_surface_height_above_geoid");
  CHECK(l.kind == HeightKind::absolute);
  CHECK(l.lat == 2);
  CHECK(l.lon == 3);
  REQUIRE(l.time);
  CHECK(*l.time == 0);
  REQUIRE(l.time_dim);
  CHECK(*l.time_dim == 0);
  CHECK(l.lat_dim == 2);
  CHECK(l.lon_dim == 3);
  CHECK(l.units == "cm");
  CHECK(l.to_metres_scale == doctest::Approx(0.01).epsilon(1e-15));

  auto anomaly = cf_dataset("sea_surface_height_above_mean_sea_level");
  CHECK(describe_dataset(anomaly, "", "mm", "mem.nc").kind == HeightKind::anomaly);
  CHECK(describe_dataset(anomaly, "", "mm", "mem.nc").units_overridden);

  // --variable without a CF height name: "sla" in the name says anomaly.
  auto named = cf_dataset("");
  named[4].name = "sla_filtered";
  const DatasetLayout n = describe_dataset(named, "sla_filtered", "", "mem.nc", "the DataArray given");
  CHECK(n.kind == HeightKind::anomaly);
  CHECK(n.chosen_because == "the DataArray given");

  CHECK(input_error_of(cf_dataset("sea_surface_height_above_reference_ellipsoid"))
            .find("ellipsoidal height includes the geoid") != std::string::npos);
  CHECK(input_error_of(named) ==
        "mem.nc: no variable has a CF sea-surface-height standard_name "
        "(sea_surface_height_above_geoid, sea_surface_height_above_geopotential_datum, "
        "sea_surface_height_above_mean_sea_level, sea_surface_height_above_sea_level, "
        "sea_surface_height); candidates on latitude/longitude dimensions: sla_filtered; "
        "choose one with variable=");
  auto two = cf_dataset("sea_surface_height");
  two.push_back(var("sla2", {"lat", "lon"}, {5, 6}, {{"standard_name", "sea_surface_height"}}));
  CHECK(input_error_of(two).find("several variables") != std::string::npos);
  CHECK(input_error_of(cf_dataset("sea_surface_height"), "nope") ==
        "mem.nc: variable nope: not found in the dataset (variables: time, depth, lat, lon, adt)");

  auto swapped = cf_dataset("sea_surface_height");
  swapped[4].dims = {"time", "depth", "lon", "lat"};
  swapped[4].shape = {3, 1, 6, 5};
  CHECK(input_error_of(swapped).find("unsupported dimension order (time=3, depth=1, lon=6, lat=5)") !=
        std::string::npos);
  auto deep = cf_dataset("sea_surface_height");
  deep[1].shape = {2};
  deep[4].shape = {3, 2, 5, 6};
  CHECK(input_error_of(deep).find("depth has size 2 and is not time") != std::string::npos);
  auto no_units = cf_dataset("sea_surface_height");
  no_units[4].text.erase("units");
  CHECK(input_error_of(no_units) ==
        "mem.nc: variable adt: has no units attribute; give the height units with units= "
        "(e.g. units=\"m\")");
  CHECK(input_error_of(cf_dataset("sea_surface_height"), "", "degC").find("are not a length") !=
        std::string::npos);
  auto no_lat = cf_dataset("sea_surface_height");
  no_lat[2].text.clear();
  CHECK(input_error_of(no_lat).find("no latitude coordinate") != std::string::npos);
}

TEST_CASE("unpacking_from_attributes: the reader's packing rules (CF 8.1, 2.5.1)") {
  using E = chunkio::ElementType;
  // int16 in cm: scale 0.1, offset 20, _FillValue -32767, valid_range [-30000, 30000].
  const Unpacking u = unpacking_from_attributes(
      E::i16,
      {{"scale_factor", E::f32, {0.1}}, {"add_offset", E::f32, {20}}, {"_FillValue", E::i16, {-32767}},
       {"valid_range", E::i16, {-30000, 30000}}},
      false, 0.01, 0.0, "p.nc", "adt");
  CHECK(u.scale_factor == 0.1);
  CHECK(u.add_offset == 20);
  REQUIRE(u.fill_value);
  CHECK(*u.fill_value == -32767);
  CHECK(*u.valid_min == -30000);
  CHECK(*u.valid_max == 30000);
  // Without _FillValue: the netCDF default fill of the type (netcdf.h NC_FILL_SHORT).
  CHECK(*unpacking_from_attributes(E::i16, {}, false, 1, 0, "", "x").fill_value == NC_FILL_SHORT);
  CHECK_FALSE(unpacking_from_attributes(E::i8, {}, false, 1, 0, "", "x").fill_value);
  // Float storage compares at float precision: a double 0.1 fill is stored 0.1f.
  CHECK(*unpacking_from_attributes(E::f32, {{"_FillValue", E::f64, {0.1}}}, false, 1, 0, "", "x")
             .fill_value == static_cast<double>(0.1f));
  // _Unsigned (NUG): -1 of a byte attribute of the storage type is 255.
  const Unpacking w =
      unpacking_from_attributes(E::i8, {{"_FillValue", E::i8, {-1}}}, true, 1, 0, "", "x");
  CHECK(*w.fill_value == 255);
  CHECK(w.unsigned_data);
  CHECK_THROWS_AS(unpacking_from_attributes(E::i16, {{"scale_factor", E::f64, {0}}}, false, 1, 0,
                                            "p.nc", "adt"),
                  InputError);
  CHECK_THROWS_AS(unpacking_from_attributes(E::i16, {{"valid_range", E::i16, {5, 1}}}, false, 1,
                                            0, "p.nc", "adt"),
                  InputError);
}

TEST_CASE("compute_currents equals the file output of run_currents bit for bit") {
  TempDir tmp;
  const Scene s(2, 70, 50);
  const std::string in = (tmp.path / "eddies.nc").string();
  s.write(in);
  const std::vector<std::string> fields = parse_field_list("all");
  for (int order : {2, 6}) {
    for (EquatorMethod eq : {EquatorMethod::blend, EquatorMethod::mask}) {
      CurrentsJob job;
      job.input = in;
      job.output = (tmp.path / ("out" + std::to_string(order) + ".nc")).string();
      job.options.order = order;
      job.options.equator = eq;
      job.options.coast = order == 6 ? CoastMethod::mask : CoastMethod::one_sided;
      job.options.earth = order == 6 ? EarthModel::sphere : EarthModel::wgs84;
      job.writer.force = true;
      job.fields = fields;
      const CurrentsSummary file_sum = run_currents(job);

      const Grid grid = make_memory_grid(s.lat, s.lon, "", "");
      Unpacking unpacking;
      unpacking.fill_value = static_cast<double>(fill);  // the file's _FillValue
      Outputs out(fields, s.nt * s.ny * s.nx);
      const CurrentsSummary mem_sum =
          compute_currents(s.view(), unpacking, grid, job.options, out.arrays, 2, "", "");
      CHECK(mem_sum.valid == file_sum.valid);
      CHECK(mem_sum.flagged == file_sum.flagged);
      std::size_t k = 0;
      for (const std::string& f : fields) {
        CAPTURE(f);
        CAPTURE(order);
        if (f == "quality") {
          CHECK(read_var<signed char>(job.output, "quality") ==
                std::vector<signed char>(out.quality.begin(), out.quality.end()));
          continue;
        }
        const std::vector<float> file = read_var<float>(job.output, f.c_str());
        const std::vector<float>& mem = out.floats[k++];
        REQUIRE(file.size() == mem.size());
        std::size_t differ = 0, nans = 0;
        for (std::size_t c = 0; c < file.size(); ++c) {
          differ += file_bits(file[c]) != file_bits(mem[c]);
          nans += std::isnan(mem[c]);
        }
        CHECK(differ == 0);
        CHECK(nans > 0);  // land
        CHECK(nans < mem.size());
      }
    }
  }
}

TEST_CASE("compute_currents: strided and masked input, threads, float64") {
  const Scene s(1, 40, 30);
  const Grid grid = make_memory_grid(s.lat, s.lon, "", "");
  CurrentsOptions o;
  Unpacking unpacking;
  unpacking.fill_value = static_cast<double>(fill);
  const std::vector<std::string> fields = parse_field_list("u,vorticity");
  Outputs ref(fields, s.ny * s.nx);
  compute_currents(s.view(), unpacking, grid, o, ref.arrays, 1, "", "");

  // The same heights as doubles in column-major order (a transposed view),
  // with land as a mask instead of fill: same result, any thread count.
  std::vector<double> t(s.ny * s.nx);
  std::vector<std::uint8_t> mask(s.ny * s.nx);
  for (std::size_t j = 0; j < s.ny; ++j)
    for (std::size_t i = 0; i < s.nx; ++i) {
      const float h = s.h[j * s.nx + i];
      t[i * s.ny + j] = h == fill ? 12345.0 : static_cast<double>(h);
      mask[i * s.ny + j] = h == fill;
    }
  HeightArray a;
  a.data = t.data();
  a.type = chunkio::ElementType::f64;
  a.nt = 1;
  a.ny = s.ny;
  a.nx = s.nx;
  a.strides[1] = sizeof(double);
  a.strides[2] = static_cast<std::ptrdiff_t>(s.ny * sizeof(double));
  a.mask = mask.data();
  a.mask_strides[1] = 1;
  a.mask_strides[2] = static_cast<std::ptrdiff_t>(s.ny);
  const int before = omp_get_max_threads();
  Outputs got(fields, s.ny * s.nx);
  compute_currents(a, Unpacking(), grid, o, got.arrays, 2, "", "");
  CHECK(omp_get_max_threads() == before);  // the caller's thread count is restored
  for (std::size_t k = 0; k < ref.floats.size(); ++k)
    CHECK(std::memcmp(ref.floats[k].data(), got.floats[k].data(),
                      ref.floats[k].size() * sizeof(float)) == 0);
  CHECK(ref.quality == got.quality);

  // float64: the doubles that round to the float32 results.
  std::vector<double> u64(s.ny * s.nx), z64(s.ny * s.nx);
  std::vector<std::int8_t> q(s.ny * s.nx);
  CurrentsArrays d;
  d.fields = fields;
  d.float64 = true;
  d.data = {u64.data(), z64.data(), q.data()};
  compute_currents(s.view(), unpacking, grid, o, d, 0, "", "");
  for (std::size_t c = 0; c < u64.size(); ++c) {
    if (std::isnan(u64[c])) {
      CHECK(std::isnan(ref.floats[0][c]));
      continue;
    }
    CHECK(static_cast<float>(u64[c]) == ref.floats[0][c]);
  }
}

TEST_CASE("compute_currents: uniform northward slope gives u = -g/(f R) deta/dphi (geostrophy)") {
  // eta = a * phi (phi in radians): u = -(g / (f R1)) a, v = 0 on the sphere
  // (Stewart, Introduction to Physical Oceanography, ch. 10); the 3-point
  // stencil is exact for a linear field.
  std::vector<double> lat, lon;
  for (int j = 0; j < 21; ++j) lat.push_back(40.0 + 0.25 * j);
  for (int i = 0; i < 11; ++i) lon.push_back(-30.0 + 0.25 * i);
  const double a = 2.0;  // m per radian
  std::vector<double> h;
  for (double la : lat)
    for (std::size_t i = 0; i < lon.size(); ++i) h.push_back(a * la * deg);
  HeightArray arr;
  arr.data = h.data();
  arr.ny = lat.size();
  arr.nx = lon.size();
  arr.strides[1] = static_cast<std::ptrdiff_t>(lon.size() * sizeof(double));
  arr.strides[2] = sizeof(double);
  const Grid grid = make_memory_grid(lat, lon, "", "");
  CurrentsOptions o;
  o.earth = EarthModel::sphere;
  std::vector<double> u(h.size()), v(h.size());
  std::vector<std::int8_t> q(h.size());
  CurrentsArrays out;
  out.fields = {"u", "v", "quality"};
  out.float64 = true;
  out.data = {u.data(), v.data(), q.data()};
  compute_currents(arr, Unpacking(), grid, o, out, 1, "", "");
  const std::size_t c = 10 * lon.size() + 5;  // 42.5 N, away from the edges
  const double f = 2 * earth::omega * std::sin(42.5 * deg);
  CHECK(u[c] == doctest::Approx(-earth::standard_gravity * a / (f * earth::mean_radius)).epsilon(1e-9));
  CHECK(std::fabs(v[c]) < 1e-12);
  CHECK(q[c] == 0);
  CHECK(q[0] == quality::one_sided);  // corner: one-sided stencil
}

TEST_CASE("compute_currents: clear errors for shapes, coordinates, all-missing steps") {
  const Scene s(3, 20, 10);
  const Grid grid = make_memory_grid(s.lat, s.lon, "", "");
  CurrentsOptions o;
  const std::vector<std::string> fields = parse_field_list("u");
  Outputs out(fields, s.nt * s.ny * s.nx);

  HeightArray wrong = s.view();
  wrong.nx = 9;
  CHECK_THROWS_WITH_AS(compute_currents(wrong, Unpacking(), grid, o, out.arrays, 1, "m.nc", "adt"),
                       "m.nc: variable adt: heights have 20 x 9 cells per map, the coordinates "
                       "20 latitudes x 10 longitudes",
                       InputError);

  std::vector<float> h = s.h;
  for (std::size_t c = s.ny * s.nx; c < 2 * s.ny * s.nx; ++c)
    h[c] = std::numeric_limits<float>::quiet_NaN();
  HeightArray holes = s.view();
  holes.data = h.data();
  CHECK_THROWS_WITH_AS(compute_currents(holes, Unpacking(), grid, o, out.arrays, 1, "", "eta"),
                       "variable eta: every cell is missing (NaN, masked or fill) at time step 1",
                       InputError);
  CHECK_THROWS_WITH_AS(compute_currents(s.view(), Unpacking(), grid, o, out.arrays, -1, "", ""),
                       "--threads: must be >= 0", UsageError);

  std::vector<double> lat = s.lat;
  std::swap(lat[3], lat[4]);
  CHECK_THROWS_WITH_AS(make_memory_grid(lat, s.lon, "", ""),
                       "latitude is not strictly monotonic (at index 4)", InputError);
  CHECK_THROWS_AS(make_memory_grid({10.0}, s.lon, "", ""), InputError);
}
