// fuzz_metadata — libFuzzer target: the reader's interpretation of a netCDF
// file held in memory (Reader::from_memory, netCDF-C nc_open_mem): variable
// detection, units, packing, coordinates, layouts, projected/curvilinear
// grids, CF time; then the grid, a read of every row and one pass of the
// velocity and diagnostic kernels on small grids.
//
// Input: either a netCDF file as is (bytes starting with "CDF"; with the
// environment variable SEATILT_FUZZ_HDF5=1 also the HDF5 signature), or a
// recipe (any other bytes) from which a small, valid netCDF
// file is built in memory (nc_create_mem / nc_close_memio) with dimensions,
// variables, attributes and values drawn from the bytes and from pools of
// CF words. The recipe reaches the detection logic far more often than
// mutated file bytes, which mostly stop at the netCDF-C header parser.
//
// Raw HDF5 is off by default: HDF5 1.10.8 itself corrupts memory on mutated
// files within seconds (e.g. memcpy-param-overlap in H5HG_read, reached from
// netCDF-C through H5DSget_num_scales), which seatilt cannot prevent; with it
// on, the target fuzzes HDF5 more than seatilt (docs/hardening.md).
//
// Contract checked: only seatilt::Error may escape the library (anything
// else — std::out_of_range, std::bad_alloc, a crash, undefined behaviour —
// is a finding); what a Reader reports is consistent (sizes > 0, values
// finite and monotonic, the fields of HeightInfo agree with each other).
#include <fuzzer/FuzzedDataProvider.h>
#include <netcdf.h>
#include <netcdf_mem.h>

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "seatilt/diagnostics.hpp"
#include "seatilt/error.hpp"
#include "seatilt/grid.hpp"
#include "seatilt/kernel.hpp"
#include "seatilt/reader.hpp"
#include "seatilt/tiling.hpp"

namespace {

using seatilt::Error;

[[noreturn]] void finding(const char* what) {
  std::fprintf(stderr, "fuzz_metadata: contract broken: %s\n", what);
  std::abort();
}
#define EXPECT(c)          \
  do {                     \
    if (!(c)) finding(#c); \
  } while (0)

const char* const dim_names[] = {"time", "lat", "lon", "depth", "y", "x", "latitude", "longitude"};
const char* const var_names[] = {"ssh", "lat",   "lon",      "time",     "x",       "y",
                                 "crs", "lat2d", "lon2d",    "depth",    "sla_var", "zos",
                                 "adt", "u",     "latitude", "longitude"};
const char* const att_names[] = {"units",
                                 "standard_name",
                                 "axis",
                                 "calendar",
                                 "_FillValue",
                                 "missing_value",
                                 "scale_factor",
                                 "add_offset",
                                 "valid_min",
                                 "valid_max",
                                 "valid_range",
                                 "long_name",
                                 "coordinates",
                                 "grid_mapping",
                                 "_Unsigned",
                                 "grid_mapping_name",
                                 "latitude_of_projection_origin",
                                 "straight_vertical_longitude_from_pole",
                                 "standard_parallel",
                                 "false_easting",
                                 "semi_major_axis",
                                 "inverse_flattening",
                                 "longitude_of_central_meridian"};
const char* const texts[] = {"degrees_north",
                             "degrees_east",
                             "degree_N",
                             "m",
                             "cm",
                             "mm",
                             "km",
                             "furlong",
                             "K",
                             "1",
                             "days since 2000-01-01",
                             "hours since 1970-01-01 00:00:00",
                             "seconds since 1582-10-10",
                             "days since -0001-12-31",
                             "months since 2000-01-01",
                             "days since 2000-13-45",
                             "days since 0000-01-01T00:00:00+05:30",
                             "sea_surface_height_above_geoid",
                             "sea_surface_height_above_mean_sea_level",
                             "sea_surface_height_above_reference_ellipsoid",
                             "sea_surface_height",
                             "latitude",
                             "longitude",
                             "time",
                             "projection_x_coordinate",
                             "projection_y_coordinate",
                             "X",
                             "Y",
                             "T",
                             "standard",
                             "noleap",
                             "360_day",
                             "julian",
                             "proleptic_gregorian",
                             "all_leap",
                             "none",
                             "true",
                             "polar_stereographic",
                             "lambert_azimuthal_equal_area",
                             "lambert_conformal_conic",
                             "transverse_mercator",
                             "crs: x y",
                             "crs",
                             "lat2d lon2d",
                             "crs: x y crs2: lat lon",
                             "sea level anomaly",
                             "",
                             " ",
                             "m s-1",
                             "m/s",
                             "\xff\xfe garbage \x01",
                             "degrees",
                             "radian"};

const nc_type numeric_types[] = {NC_BYTE,  NC_SHORT,  NC_INT,  NC_FLOAT, NC_DOUBLE,
                                 NC_UBYTE, NC_USHORT, NC_UINT, NC_INT64, NC_UINT64};

template <class T, std::size_t N>
const T& pick(FuzzedDataProvider& in, const T (&pool)[N]) {
  return pool[in.ConsumeIntegralInRange<std::size_t>(0, N - 1)];
}

double fuzz_number(FuzzedDataProvider& in) {
  switch (in.ConsumeIntegralInRange<int>(0, 9)) {
    case 0:
      return std::numeric_limits<double>::quiet_NaN();
    case 1:
      return std::numeric_limits<double>::infinity();
    case 2:
      return -std::numeric_limits<double>::infinity();
    case 3:
      return 0.0;
    case 4:
      return in.ConsumeFloatingPoint<double>();
    default:
      return static_cast<double>(in.ConsumeIntegralInRange<int>(-400, 400));
  }
}

bool is_netcdf4(int mode) { return (mode & NC_NETCDF4) != 0; }

// Builds a netCDF file in memory from the recipe; returns its bytes (empty
// when netCDF-C refuses the recipe, which is not a finding).
std::vector<unsigned char> build_file(FuzzedDataProvider& in) {
  // netCDF-4 (HDF5) files are ~100 times slower to make and open under the
  // sanitizers (HDF5 allocates a large metadata cache per file), so 1 in 8.
  static const int modes[] = {NC_CLASSIC_MODEL, NC_64BIT_OFFSET, NC_64BIT_DATA,
                              NC_CLASSIC_MODEL, NC_64BIT_OFFSET, NC_64BIT_DATA,
                              NC_NETCDF4,       NC_64BIT_DATA,   NC_CLASSIC_MODEL,
                              NC_64BIT_OFFSET,  NC_64BIT_DATA,   NC_CLASSIC_MODEL,
                              NC_64BIT_OFFSET,  NC_64BIT_DATA,   NC_NETCDF4 | NC_CLASSIC_MODEL,
                              NC_64BIT_DATA};
  const int mode = pick(in, modes);
  int nc = -1;
  if (nc_create_mem("recipe.nc", mode | NC_NOCLOBBER, 4096, &nc) != NC_NOERR) return {};
  nc_set_fill(nc, NC_NOFILL, nullptr);
  struct Var {
    int id;
    nc_type type;
    std::size_t values;
    std::vector<std::size_t> count;  // per dimension (the hyperslab written)
  };
  std::vector<int> dims;
  std::vector<std::size_t> lens;
  const int ndims = in.ConsumeIntegralInRange<int>(1, 4);
  for (int k = 0; k < ndims; ++k) {
    const bool unlimited = k == 0 && in.ConsumeBool();
    const std::size_t len = in.ConsumeIntegralInRange<std::size_t>(0, 12);
    int id = -1;
    if (nc_def_dim(nc, dim_names[(k + in.ConsumeIntegralInRange<int>(0, 7)) % 8],
                   unlimited ? NC_UNLIMITED : len, &id) != NC_NOERR)
      continue;
    dims.push_back(id);
    lens.push_back(len);  // an unlimited dimension gets LEN records when written
  }
  if (dims.empty()) {
    nc_abort(nc);
    return {};
  }
  std::vector<Var> vars;
  const int nvars = in.ConsumeIntegralInRange<int>(1, 7);
  for (int k = 0; k < nvars; ++k) {
    std::string name =
        in.ConsumeBool() ? std::string(pick(in, var_names)) : in.ConsumeRandomLengthString(12);
    nc_type type = pick(in, numeric_types);
    if (!is_netcdf4(mode) || (mode & NC_CLASSIC_MODEL))
      if (type > NC_DOUBLE && mode != NC_64BIT_DATA) type = NC_FLOAT;
    if (in.ConsumeIntegralInRange<int>(0, 15) == 0) type = NC_CHAR;
    const int nd = in.ConsumeIntegralInRange<int>(0, 4);
    std::vector<int> vd;
    std::vector<std::size_t> counts;
    std::size_t count = 1;
    for (int d = 0; d < nd; ++d) {
      const std::size_t at = in.ConsumeIntegralInRange<std::size_t>(0, dims.size() - 1);
      vd.push_back(dims[at]);
      counts.push_back(lens[at]);
      count *= lens[at];
    }
    int id = -1;
    if (nc_def_var(nc, name.c_str(), type, nd, vd.data(), &id) != NC_NOERR) continue;
    vars.push_back({id, type, count, counts});
    const int natts = in.ConsumeIntegralInRange<int>(0, 7);
    for (int a = 0; a < natts; ++a) {
      const char* att = pick(in, att_names);
      if (in.ConsumeBool()) {
        const std::string text =
            in.ConsumeBool() ? std::string(pick(in, texts)) : in.ConsumeRandomLengthString(40);
        nc_put_att_text(nc, id, att, text.size(), text.data());
      } else {
        const std::size_t n = in.ConsumeIntegralInRange<std::size_t>(0, 3);
        std::vector<double> values(n);
        for (double& v : values) v = fuzz_number(in);
        // _FillValue must have the variable's type; others any numeric type.
        const nc_type at =
            std::strcmp(att, "_FillValue") == 0 && type != NC_CHAR ? type : pick(in, numeric_types);
        nc_put_att_double(nc, id, att, at, n, values.data());
      }
    }
  }
  if (in.ConsumeBool()) {
    const std::string text = in.ConsumeRandomLengthString(20);
    nc_put_att_text(nc, NC_GLOBAL, "title", text.size(), text.data());
  }
  if (nc_enddef(nc) != NC_NOERR) {
    nc_abort(nc);
    return {};
  }
  // Values: start + step * k (coordinates are often monotonic), with holes.
  for (const Var& v : vars) {
    if (v.type == NC_CHAR || v.values == 0 || v.values > 4096) continue;
    std::vector<double> values(v.values);
    const double first = fuzz_number(in), step = fuzz_number(in);
    for (std::size_t k = 0; k < values.size(); ++k) {
      values[k] = first + step * static_cast<double>(k);
      if (in.ConsumeIntegralInRange<int>(0, 31) == 0) values[k] = fuzz_number(in);
    }
    // Out-of-range conversions give NC_ERANGE and store what they can.
    const std::vector<std::size_t> start(v.count.size(), 0);
    nc_put_vara_double(nc, v.id, start.data(), v.count.data(), values.data());
  }
  NC_memio memio{};
  if (nc_close_memio(nc, &memio) != NC_NOERR) {
    nc_abort(nc);  // may still be open after a failed close
    std::free(memio.memory);
    return {};
  }
  std::vector<unsigned char> out(static_cast<unsigned char*>(memio.memory),
                                 static_cast<unsigned char*>(memio.memory) + memio.size);
  std::free(memio.memory);
  return out;
}

void check_coordinate(const seatilt::CoordVar& c, std::size_t n) {
  EXPECT(c.values.size() == n);
  for (double x : c.values) EXPECT(std::isfinite(x));
  if (n >= 2) {
    const bool up = c.values[1] > c.values[0];
    for (std::size_t k = 1; k < n; ++k)
      EXPECT(up ? c.values[k] > c.values[k - 1] : c.values[k] < c.values[k - 1]);
  }
}

// Everything a command does with an opened input, bounded to small grids.
void exercise(seatilt::Reader& reader) {
  const seatilt::HeightInfo& info = reader.info();
  EXPECT(info.nt >= 1 && info.ny >= 1 && info.nx >= 1);
  EXPECT(!info.variable.empty());
  EXPECT(std::isfinite(info.to_metres_scale) && info.to_metres_scale != 0.0);
  EXPECT(std::isfinite(info.scale_factor) && info.scale_factor != 0.0);
  if (info.grid_kind == seatilt::GridKind::lat_lon) {
    check_coordinate(info.lat, info.ny);
    check_coordinate(info.lon, info.nx);
    for (double x : info.lat.values) EXPECT(x >= -90.0 && x <= 90.0);
  }
  if (info.time) EXPECT(info.time->values.size() == info.nt);
  for (std::size_t t = 0; t < std::min<std::size_t>(info.nt, 2); ++t) {
    try {
      (void)reader.date(t).iso();
    } catch (const Error&) {
    }
  }
  if (info.ny * info.nx > 4096) return;
  seatilt::Field eta;
  reader.read_rows(0, 0, info.ny, eta);
  EXPECT(eta.ny == info.ny && eta.nx == info.nx && eta.data.size() == info.ny * info.nx);
  if (info.grid_kind != seatilt::GridKind::lat_lon) {
    (void)seatilt::make_curvilinear_grid(info, seatilt::EarthModel::wgs84);
    return;
  }
  std::optional<seatilt::Grid> grid;
  try {
    grid.emplace(info.lat.values, info.lon.values);
  } catch (const std::invalid_argument&) {
    return;  // documented: the caller turns it into an InputError
  }
  for (int order : {2, 6}) {
    seatilt::CurrentsOptions options;
    options.order = order;
    const seatilt::GeostrophicKernel kernel(*grid, options);
    const seatilt::KinematicsKernel kinematics(*grid, order, options.coast, options.earth);
    seatilt::Field u, v;
    std::vector<std::uint8_t> flags;
    kernel.compute(eta, 0, 0, info.ny, u, v, flags);
    EXPECT(u.data.size() == info.ny * info.nx && flags.size() == info.ny * info.nx);
    seatilt::Kinematics kin;
    kinematics.compute(u, v, 0, 0, info.ny, kin, flags);
  }
}

}  // namespace

// netCDF-C's classic header parser allocates what a (mutated) header declares
// before checking that the bytes exist, e.g. a 4 GiB name (third-party; with
// a file on disk the allocation is lazy and the read then fails). Allocations
// above 512 MiB return null here, which netCDF-C reports as NC_ENOMEM; one
// from seatilt's own code (operator new) still aborts and is a finding.
extern "C" const char* __asan_default_options() {
  return "max_allocation_size_mb=512:allocator_may_return_null=1";
}

// Third-party leaks only. HDF5: see tests/sanitizer/lsan.supp. netCDF-C:
// a failed nc_open_mem of a corrupted netCDF-4 image leaks its half-built
// metadata, and the reader leaves handles open on purpose after a failed
// attribute load (reader.cpp, "handles that must not be closed"). A missing
// nc_close in seatilt's own code is caught by the sanitizer test run
// (scripts/test-asan), which has no netCDF-C suppression.
extern "C" const char* __lsan_default_suppressions() {
  return "leak:libhdf5_serial.so\nleak:libnetcdf.so\n";
}

extern "C" int LLVMFuzzerInitialize(int*, char***) {
  // Declared sizes beyond this are refused by the reader (resources.hpp), as
  // on a small machine; keeps every allocation far below libFuzzer's limit.
  setenv("SEATILT_MAX_MEMORY_MB", "256", 1);
  // Quiet netCDF-C/HDF5 diagnostics.
  setenv("HDF5_USE_FILE_LOCKING", "FALSE", 1);
  return 0;
}

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  std::vector<unsigned char> file;
  static const bool hdf5 = [] {
    const char* e = std::getenv("SEATILT_FUZZ_HDF5");
    return e != nullptr && std::strcmp(e, "1") == 0;
  }();
  const bool raw = (size >= 3 && std::memcmp(data, "CDF", 3) == 0) ||
                   (hdf5 && size >= 8 && std::memcmp(data, "\x89HDF\r\n\x1a\n", 8) == 0);
  if (raw) {
    file.assign(data, data + size);
  } else {
    FuzzedDataProvider in(data, size);
    file = build_file(in);
    if (file.empty()) return 0;
  }
  for (bool horizontal : {false, true}) {
    seatilt::ReaderOptions options;
    options.horizontal_grids = horizontal;
    try {
      seatilt::Reader reader =
          seatilt::Reader::from_memory("fuzz.nc", file.data(), file.size(), options);
      exercise(reader);
    } catch (const Error& e) {
      EXPECT(e.what()[0] != '\0');  // the documented outcome for bad input
    }
  }
  return 0;
}
