#include "seatilt/tiling.hpp"

#include <doctest/doctest.h>
#include <netcdf.h>
#include <omp.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <string>
#include <vector>

#include "analytic.hpp"
#include "seatilt/chunkio.hpp"
#include "seatilt/error.hpp"
#include "seatilt/product.hpp"

using namespace seatilt;
namespace fs = std::filesystem;

namespace {
constexpr double deg = 3.14159265358979323846 / 180;

void nc_ok(int status) { REQUIRE_MESSAGE(status == NC_NOERR, nc_strerror(status)); }

struct TempDir {
  fs::path path;
  TempDir() {
    char tmpl[] = "/tmp/seatilt-test-tiling-XXXXXX";
    path = mkdtemp(tmpl);
  }
  ~TempDir() { fs::remove_all(path); }
};

// Writes a (time, lat, lon) float height file with two eddies, a land block
// and descending latitude.
// CHUNKED: deflate + shuffle in (1, 16, nx) chunks (read raw), else contiguous.
void make_input(const std::string& path, std::size_t ny, std::size_t nx, std::size_t nt,
                bool chunked = false) {
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
  const float fill = -999.f;
  nc_ok(nc_put_att_float(nc, vh, "_FillValue", NC_FLOAT, 1, &fill));
  if (chunked) {
    const std::size_t chunk[3] = {1, 16, nx};
    nc_ok(nc_def_var_chunking(nc, vh, NC_CHUNKED, chunk));
    nc_ok(nc_def_var_deflate(nc, vh, 1, 1, 2));
  }
  nc_ok(nc_enddef(nc));
  std::vector<double> t(nt), lat(ny), lon(nx);
  for (std::size_t k = 0; k < nt; ++k) t[k] = 27000.0 + static_cast<double>(k);
  for (std::size_t j = 0; j < ny; ++j) lat[j] = 45.0 - 0.1 * static_cast<double>(j);
  for (std::size_t i = 0; i < nx; ++i) lon[i] = 10.0 + 0.1 * static_cast<double>(i);
  nc_ok(nc_put_var_double(nc, vt, t.data()));
  nc_ok(nc_put_var_double(nc, vy, lat.data()));
  nc_ok(nc_put_var_double(nc, vx, lon.data()));
  std::vector<float> h(nt * ny * nx);
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
        h[(k * ny + j) * nx + i] = land ? fill : static_cast<float>(a.eta(p, l) + b.eta(p, l));
      }
  nc_ok(nc_put_var_float(nc, vh, h.data()));
  nc_ok(nc_close(nc));
}

std::vector<float> read_var(const std::string& path, const char* name) {
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
  std::vector<float> out(n);
  nc_ok(nc_get_var_float(nc, v, out.data()));
  nc_ok(nc_close(nc));
  return out;
}
}  // namespace

TEST_CASE("plan_bands covers every row once") {
  const auto b = plan_bands(10, 4);
  REQUIRE(b.size() == 3);
  CHECK(b[0].j0 == 0);
  CHECK(b[2].j0 == 8);
  CHECK(b[2].n == 2);
  CHECK(plan_bands(3, 10).size() == 1);
  CHECK_THROWS(plan_bands(3, 0));
}

TEST_CASE("band height follows the memory budget and alignment") {
  // 8640 columns (1/24 deg), halo 6, 256 MiB, memory model of tiling.hpp:
  // 2 x 8640 x (86 R + 50 x 6) <= 268435456 -> R <= 177.1 -> 160 (multiple of 32)
  const std::size_t r = band_rows_for_budget(8640, 4320, 6, 256u << 20, 32);
  CHECK(r % 32 == 0);
  CHECK(r == 160);
  CHECK(band_rows_for_budget(100, 20, 3, 1u << 30, 8) == 20);  // whole grid fits
  CHECK(band_rows_for_budget(1000000, 100, 3, 1u << 20, 4) == 4);  // at least one aligned band
}

TEST_CASE("run_currents: identical output for any band height and thread count") {
  TempDir tmp;
  const std::string in = (tmp.path / "eddies.nc").string();
  make_input(in, 120, 90, 2);
  const int threads_before = omp_get_max_threads();
  std::vector<std::vector<float>> ref;
  const char* names[] = {"u", "v", "vorticity", "okubo_weiss", "quality"};
  int run = 0;
  for (std::size_t rows : {0, 1, 7, 64}) {
    for (int threads : {1, 2}) {
      omp_set_num_threads(threads);
      CurrentsJob job;
      job.input = in;
      job.output = (tmp.path / ("out" + std::to_string(run++) + ".nc")).string();
      job.options.order = 4;
      job.fields = parse_field_list("all");
      job.band_rows = rows;
      const CurrentsSummary s = run_currents(job);
      CHECK(s.steps == 2);
      CHECK(s.cells == 2 * 120 * 90);
      CHECK(s.valid < s.cells);
      std::vector<std::vector<float>> now;
      for (const char* n : names) now.push_back(read_var(job.output, n));
      if (ref.empty()) {
        ref = now;
      } else {
        for (std::size_t k = 0; k < ref.size(); ++k) {
          CAPTURE(names[k]);
          CAPTURE(rows);
          CHECK(std::memcmp(ref[k].data(), now[k].data(), ref[k].size() * sizeof(float)) == 0);
        }
      }
    }
  }
  omp_set_num_threads(threads_before);
}

TEST_CASE("run_currents: raw chunk reads + direct chunk writes equal the netCDF-C path") {
  TempDir tmp;
  const std::string in = (tmp.path / "eddies.nc").string();
  make_input(in, 120, 90, 3, true);
  const char* names[] = {"u", "v", "speed", "vorticity", "strain_normal", "strain_shear",
                         "strain", "okubo_weiss", "quality"};
  std::vector<std::vector<float>> ref;
  int run = 0;
  for (bool fast : {false, true}) {
    for (int threads : {1, 3}) {
      for (std::size_t rows : {0, 13}) {
        omp_set_num_threads(threads);
        CurrentsJob job;
        job.input = in;
        job.output = (tmp.path / ("p" + std::to_string(run++) + ".nc")).string();
        job.fields = parse_field_list("all");
        job.band_rows = rows;
        job.reader.raw_chunks = fast;
        job.writer.chunk_writes = fast ? ChunkWrites::automatic : ChunkWrites::netcdf;
        run_currents(job);
        std::vector<std::vector<float>> now;
        for (const char* n : names) now.push_back(read_var(job.output, n));
        if (ref.empty()) {
          ref = now;
          continue;
        }
        for (std::size_t k = 0; k < ref.size(); ++k) {
          CAPTURE(names[k]);
          CAPTURE(fast);
          CAPTURE(threads);
          CAPTURE(rows);
          CHECK(std::memcmp(ref[k].data(), now[k].data(), ref[k].size() * sizeof(float)) == 0);
        }
      }
    }
  }
}

namespace {
int bands_seen = 0;
void stop_after_two_bands() {
  if (++bands_seen > 2) throw OutputError("stopped");
}
}  // namespace

TEST_CASE("run_currents: a run abandoned between bands leaves nothing at the output path") {
  TempDir tmp;
  const std::string in = (tmp.path / "eddies.nc").string();
  make_input(in, 60, 40, 2);
  CurrentsJob job;
  job.input = in;
  job.output = (tmp.path / "out.nc").string();
  job.fields = parse_field_list("all");
  job.band_rows = 10;
  job.between_bands = &stop_after_two_bands;
  CHECK_THROWS_AS(run_currents(job), OutputError);
  CHECK(bands_seen == 3);
  std::size_t files = 0;
  for (const auto& e : fs::directory_iterator(tmp.path)) { (void)e; ++files; }
  CHECK(files == 1);  // only the input
}

TEST_CASE("run_currents: a corrupt input chunk stops the pipeline: InputError, no output") {
  TempDir tmp;
  const std::string in = (tmp.path / "eddies.nc").string();
  make_input(in, 120, 90, 2, true);
  {
    chunkio::H5File file(in, true);
    chunkio::H5Chunked ds(file, "zeta_surface");
    const std::vector<unsigned char> junk(100, 0x42);
    ds.write_chunk({1, 64, 0}, junk.data(), junk.size());
    file.close();
  }
  for (int threads : {1, 2}) {
    omp_set_num_threads(threads);
    CurrentsJob job;
    job.input = in;
    job.output = (tmp.path / "out.nc").string();
    job.fields = parse_field_list("all");
    job.band_rows = 16;
    CHECK_THROWS_AS(run_currents(job), InputError);
    std::size_t files = 0;
    for (const auto& e : fs::directory_iterator(tmp.path)) { (void)e; ++files; }
    CHECK(files == 1);
  }
}

TEST_CASE("run_currents: an all-fill step is an input error and leaves no output") {
  TempDir tmp;
  const std::string in = (tmp.path / "empty.nc").string();
  make_input(in, 20, 20, 1);
  {  // overwrite every height with the fill value
    int nc = 0, v = 0;
    nc_ok(nc_open(in.c_str(), NC_WRITE, &nc));
    nc_ok(nc_inq_varid(nc, "zeta_surface", &v));
    std::vector<float> fill(400, -999.f);
    nc_ok(nc_put_var_float(nc, v, fill.data()));
    nc_ok(nc_close(nc));
  }
  CurrentsJob job;
  job.input = in;
  job.output = (tmp.path / "out.nc").string();
  job.fields = parse_field_list("all");
  CHECK_THROWS_AS(run_currents(job), InputError);
  CHECK_FALSE(fs::exists(job.output));
  std::size_t files = 0;
  for (const auto& e : fs::directory_iterator(tmp.path)) { (void)e; ++files; }
  CHECK(files == 1);  // only the input: no temporary file left behind
}
