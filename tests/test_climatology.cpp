#include "seatilt/climatology.hpp"

#include <doctest/doctest.h>
#include <netcdf.h>
#include <unistd.h>

#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "seatilt/error.hpp"
#include "seatilt/product.hpp"

using namespace seatilt;
namespace fs = std::filesystem;

namespace {

constexpr double nan_d = std::numeric_limits<double>::quiet_NaN();
constexpr double pi = 3.14159265358979323846;

struct TempDir {
  fs::path path;
  TempDir() {
    char tmpl[] = "/tmp/seatilt-test-climatology-XXXXXX";
    path = mkdtemp(tmpl);
  }
  ~TempDir() { fs::remove_all(path); }
};

double rel(double a, double b) {
  const double s = std::max(std::fabs(a), std::fabs(b));
  return s == 0.0 ? 0.0 : std::fabs(a - b) / s;
}

/// A small state on a 2 x 3 grid, one period, ready to add samples to.
ClimatologyState small_state(ClimatologyPeriod period = ClimatologyPeriod::all) {
  ClimatologyState st;
  st.period = period;
  st.calendar = "standard";
  st.kind = HeightKind::anomaly;
  st.settings = {number_attribute("geostrophy_stencil_order", NC_INT, {2}),
                 text_attribute("geostrophy_earth_model", "wgs84")};
  st.lat.name = st.lat.dim = "lat";
  st.lat.values = {10.0, 11.0};
  st.lat.attrs = {text_attribute("units", "degrees_north"),
                  text_attribute("standard_name", "latitude")};
  st.lon.name = st.lon.dim = "lon";
  st.lon.values = {-30.0, -29.0, -28.0};
  st.lon.attrs = {text_attribute("units", "degrees_east")};
  st.records.assign(period_count(period), PeriodRecord{});
  st.moments = MomentGrid(period_count(period), 6);
  st.inputs = 1;
  st.first_input = "synthetic.nc";
  return st;
}

}  // namespace

TEST_CASE("periods: months and seasons DJF MAM JJA SON") {
  for (int m = 1; m <= 12; ++m) {
    CHECK(period_index(ClimatologyPeriod::all, m) == 0);
    CHECK(period_index(ClimatologyPeriod::month, m) == static_cast<std::size_t>(m - 1));
  }
  // Meteorological seasons (CF 1.12 Example 7.9: MAM JJA SON DJF; DJF runs Dec 1 to Mar 1).
  const std::size_t season_of[13] = {99, 0, 0, 1, 1, 1, 2, 2, 2, 3, 3, 3, 0};
  for (int m = 1; m <= 12; ++m) CHECK(period_index(ClimatologyPeriod::season, m) == season_of[m]);
  CHECK(period_label(ClimatologyPeriod::season, 0) == "DJF");
  CHECK(period_label(ClimatologyPeriod::month, 11) == "December");
  CHECK_THROWS_AS(period_index(ClimatologyPeriod::month, 13), std::invalid_argument);
  CHECK(parse_climatology_period(" Month ") == ClimatologyPeriod::month);
  CHECK_THROWS_AS(parse_climatology_period("year"), UsageError);
  CHECK(parse_ymd("2021-03-07", "--from") == Ymd{2021, 3, 7});
  CHECK_THROWS_AS(parse_ymd("2021-13-07", "--from"), UsageError);
  CHECK_THROWS_AS(parse_ymd("2021-03-07x", "--to"), UsageError);
}

TEST_CASE("calendars: day numbers") {
  // Julian Day Number of 2000-01-01 (Gregorian) is 2451545 (J2000.0 is JD
  // 2451545.0 at noon; Meeus, Astronomical Algorithms, 2nd ed., ch. 7).
  CHECK(calendar_day_number("proleptic_gregorian", {2000, 1, 1}) == 2451545);
  // POSIX epoch: 2000-01-01T00:00Z is 946684800 s = 10957 days after 1970-01-01.
  CHECK(calendar_day_number("standard", {2000, 1, 1}) -
            calendar_day_number("gregorian", {1970, 1, 1}) ==
        10957);
  // CF 4.4.1: the standard calendar goes from 1582-10-04 (Julian) to 1582-10-15 (Gregorian);
  // JD 2299160 and 2299161 (Meeus ch. 7).
  CHECK(calendar_day_number("standard", {1582, 10, 4}) == 2299160);
  CHECK(calendar_day_number("standard", {1582, 10, 15}) == 2299161);
  CHECK_THROWS_AS(calendar_day_number("standard", {1582, 10, 10}), std::invalid_argument);
  // 1900 is a leap year in the Julian calendar only (CF 4.4.1 julian: every 4th year).
  CHECK(calendar_day_number("julian", {1900, 3, 1}) -
            calendar_day_number("julian", {1900, 2, 28}) ==
        2);
  CHECK_THROWS_AS(calendar_day_number("proleptic_gregorian", {1900, 2, 29}), std::invalid_argument);
  // Fixed-length years (CF 4.4.1): 365, 366 and 12 x 30 days.
  CHECK(calendar_day_number("365_day", {2001, 1, 1}) -
            calendar_day_number("noleap", {2000, 1, 1}) ==
        365);
  CHECK(calendar_day_number("366_day", {2001, 1, 1}) -
            calendar_day_number("all_leap", {2000, 1, 1}) ==
        366);
  CHECK(calendar_day_number("360_day", {2001, 1, 1}) -
            calendar_day_number("360_day", {2000, 1, 1}) ==
        360);
  CHECK(calendar_day_number("360_day", {2000, 3, 1}) -
            calendar_day_number("360_day", {2000, 2, 30}) ==
        1);
  CHECK_THROWS_AS(calendar_day_number("noleap", {2000, 2, 29}), std::invalid_argument);
  CHECK(canonical_calendar("GREGORIAN") == "standard");
  CHECK(canonical_calendar("365_day") == "noleap");
  CHECK_THROWS_AS(canonical_calendar("none"), std::invalid_argument);
}

TEST_CASE("moments: analytic mean, variance and covariance") {
  // Samples u_k = 1 + 0.5 s_k, v_k = -2 + 0.3 s_k + 0.4 r_k with s = +1,-1,... and
  // r = +1,+1,-1,-1,... (orthogonal to s, zero mean): population moments
  // mean u = 1, var u = 0.25, mean v = -2, var v = 0.09 + 0.16 = 0.25, cov = 0.15.
  MomentGrid m(1, 1);
  const int n = 400;
  for (int k = 0; k < n; ++k) {
    const double s = k % 2 == 0 ? 1.0 : -1.0;
    const double r = (k / 2) % 2 == 0 ? 1.0 : -1.0;
    const double u = 1.0 + 0.5 * s, v = -2.0 + 0.3 * s + 0.4 * r;
    const double z = 1e-5 * s;
    m.add(0, 0, 1, &u, &v, &z);
  }
  const CellStatistics c = cell_statistics(m, 0);
  CHECK(c.count == static_cast<std::uint32_t>(n));
  CHECK(c.u_mean == doctest::Approx(1.0).epsilon(1e-14));
  CHECK(c.v_mean == doctest::Approx(-2.0).epsilon(1e-14));
  CHECK(c.u_var == doctest::Approx(0.25).epsilon(1e-13));
  CHECK(c.v_var == doctest::Approx(0.25).epsilon(1e-13));
  CHECK(c.uv_cov == doctest::Approx(0.15).epsilon(1e-13));
  CHECK(c.eke == doctest::Approx(0.25).epsilon(1e-13));
  CHECK(std::fabs(c.vorticity_mean) < 1e-20);
  // Speed: |(1.5, -1.7 +- 0.4)| and |(0.5, -2.3 +- 0.4)|, each a quarter of the samples.
  const double speed = 0.25 * (std::hypot(1.5, -1.3) + std::hypot(1.5, -2.1) +
                               std::hypot(0.5, -1.9) + std::hypot(0.5, -2.7));
  CHECK(c.speed_mean == doctest::Approx(speed).epsilon(1e-13));
  // Equal variances with covariance 0.15: axes at 45 degrees, std sqrt(0.25 +- 0.15).
  CHECK(c.major_direction_deg == doctest::Approx(45.0).epsilon(1e-12));
  CHECK(c.major_std == doctest::Approx(std::sqrt(0.40)).epsilon(1e-12));
  CHECK(c.minor_std == doctest::Approx(std::sqrt(0.10)).epsilon(1e-12));
}

TEST_CASE("moments: missing samples, separate vorticity count, empty cells") {
  MomentGrid m(2, 2);
  const double u[2] = {1.0, nan_d}, v[2] = {2.0, 3.0}, z[2] = {nan_d, 4e-6};
  m.add(1, 0, 2, u, v, z);
  m.add(1, 0, 2, u, v, nullptr);
  const CellStatistics c0 = cell_statistics(m, 2), c1 = cell_statistics(m, 3);
  CHECK(c0.count == 2);
  CHECK(c0.u_var == 0.0);
  CHECK(std::isnan(c0.vorticity_mean));
  CHECK(std::isnan(c0.major_direction_deg));  // zero variance: no axis
  CHECK(c1.count == 0);
  CHECK(std::isnan(c1.u_mean));
  CHECK(c1.vorticity_mean == 4e-6);
  CHECK(cell_statistics(m, 0).count == 0);
  CHECK_THROWS_AS(m.add(2, 0, 1, u, v, z), std::out_of_range);
  CHECK_THROWS_AS(m.add(0, 1, 2, u, v, z), std::out_of_range);
}

TEST_CASE("moments: stable for a large mean (Welford) against a two-pass reference") {
  // Mean 1e4 m s-1 with a spread of 1e-2: the naive sum-of-squares formula loses
  // every digit here (kappa = 1e6); Welford keeps ~1e-9 relative [Chan et al. 1983].
  std::mt19937_64 rng(42);
  std::normal_distribution<double> noise(0.0, 0.01);
  const int n = 5000;
  std::vector<double> us(n), vs(n);
  MomentGrid m(1, 1);
  for (int k = 0; k < n; ++k) {
    us[k] = 1e4 + noise(rng);
    vs[k] = -3e3 + 0.5 * (us[k] - 1e4) + noise(rng);
    m.add(0, 0, 1, &us[k], &vs[k], nullptr);
  }
  long double mu = 0, mv = 0;
  for (int k = 0; k < n; ++k) mu += us[k], mv += vs[k];
  mu /= n;
  mv /= n;
  long double suu = 0, svv = 0, suv = 0;
  for (int k = 0; k < n; ++k) {
    suu += (us[k] - mu) * (us[k] - mu);
    svv += (vs[k] - mv) * (vs[k] - mv);
    suv += (us[k] - mu) * (vs[k] - mv);
  }
  const CellStatistics c = cell_statistics(m, 0);
  CHECK(rel(c.u_mean, static_cast<double>(mu)) < 1e-14);
  CHECK(rel(c.u_var, static_cast<double>(suu / n)) < 1e-8);
  CHECK(rel(c.v_var, static_cast<double>(svv / n)) < 1e-8);
  CHECK(rel(c.uv_cov, static_cast<double>(suv / n)) < 1e-8);
}

TEST_CASE("merge: three parts equal one pass to 1e-12 (Chan, Golub & LeVeque)") {
  std::mt19937_64 rng(7);
  std::normal_distribution<double> g(0.0, 1.0);
  std::uniform_real_distribution<double> uni(0.0, 1.0);
  const std::size_t cells = 50, periods = 3;
  MomentGrid one(periods, cells),
      parts[3] = {MomentGrid(periods, cells), MomentGrid(periods, cells),
                  MomentGrid(periods, cells)};
  std::vector<double> u(cells), v(cells), z(cells);
  for (int k = 0; k < 900; ++k) {
    for (std::size_t c = 0; c < cells; ++c) {
      u[c] = 0.3 + 0.2 * g(rng) + 0.01 * static_cast<double>(c);
      v[c] = -0.1 + 0.1 * g(rng) + 0.5 * (u[c] - 0.3);
      z[c] = 1e-5 * g(rng);
      if (uni(rng) < 0.1) u[c] = nan_d;  // gaps
      if (uni(rng) < 0.1) z[c] = nan_d;
    }
    const std::size_t p = static_cast<std::size_t>(k) % periods;
    one.add(p, 0, cells, u.data(), v.data(), z.data());
    // Unequal, interleaved parts (as a job array over a shuffled archive).
    const int part = k < 100 ? 0 : (k % 5 == 0 ? 1 : 2);
    parts[part].add(p, 0, cells, u.data(), v.data(), z.data());
  }
  MomentGrid merged(periods, cells);
  merged.merge(parts[2]);
  merged.merge(parts[0]);
  merged.merge(parts[1]);
  for (std::size_t i = 0; i < periods * cells; ++i) {
    const CellStatistics a = cell_statistics(one, i), b = cell_statistics(merged, i);
    REQUIRE(a.count == b.count);
    CHECK(rel(a.u_mean, b.u_mean) < 1e-12);
    CHECK(rel(a.v_mean, b.v_mean) < 1e-12);
    CHECK(rel(a.speed_mean, b.speed_mean) < 1e-12);
    CHECK(rel(a.u_var, b.u_var) < 1e-12);
    CHECK(rel(a.v_var, b.v_var) < 1e-12);
    CHECK(rel(a.uv_cov, b.uv_cov) < 1e-12);
    CHECK(rel(a.vorticity_mean, b.vorticity_mean) < 1e-12);
    CHECK(one.count_vorticity[i] == merged.count_vorticity[i]);
  }
  CHECK_THROWS_AS(merged.merge(MomentGrid(1, cells)), std::invalid_argument);
}

TEST_CASE("principal axes of a rotated variance ellipse") {
  // Covariance R diag(s1^2, s2^2) R^T of an ellipse with axes s1 = 2, s2 = 0.5 m s-1
  // rotated by theta counter-clockwise from east (eigen-decomposition of a
  // symmetric 2x2 matrix; principal axes, Emery & Thomson 2001).
  for (double theta : {30.0, -60.0, 0.0, 89.0, -89.0, 90.0}) {
    const double c = std::cos(theta * pi / 180), s = std::sin(theta * pi / 180);
    const double a = 4.0, b = 0.25;
    const PrincipalAxes p =
        principal_axes(a * c * c + b * s * s, a * s * s + b * c * c, (a - b) * s * c);
    CHECK(p.major_std == doctest::Approx(2.0).epsilon(1e-12));
    CHECK(p.minor_std == doctest::Approx(0.5).epsilon(1e-12));
    CHECK(p.direction_deg == doctest::Approx(theta).epsilon(1e-10));
  }
  const PrincipalAxes iso = principal_axes(0.3, 0.3, 0.0);
  CHECK(std::isnan(iso.direction_deg));
  CHECK(iso.major_std == doctest::Approx(std::sqrt(0.3)));
  // A degenerate (rank-1) covariance: all variance along one line, minor axis 0.
  const PrincipalAxes line = principal_axes(1.0, 1.0, 1.0);
  CHECK(line.minor_std == doctest::Approx(0.0).epsilon(1e-12));
  CHECK(line.direction_deg == doctest::Approx(45.0));
}

TEST_CASE("state merge refuses incompatible states; empty is the identity") {
  ClimatologyState a = small_state(), b = small_state();
  b.first_input = "other.nc";
  const double u[6] = {1, 2, 3, 4, 5, 6}, v[6] = {0, 0, 0, 0, 0, 0};
  a.moments.add(0, 0, 6, u, v, nullptr);
  a.records[0] = {1, Ymd{2020, 1, 1}, Ymd{2020, 1, 1}};
  b.moments.add(0, 0, 6, v, u, nullptr);
  b.records[0] = {1, Ymd{2019, 5, 1}, Ymd{2019, 5, 1}};
  ClimatologyState empty;
  empty.merge(a);
  CHECK(empty.inputs == 1);
  a.merge(ClimatologyState{});
  a.merge(b);
  CHECK(a.inputs == 2);
  CHECK(a.records[0].steps == 2);
  CHECK(*a.records[0].first == Ymd{2019, 5, 1});
  CHECK(*a.records[0].last == Ymd{2020, 1, 1});
  CHECK(cell_statistics(a.moments, 5).u_mean == doctest::Approx(3.0));

  ClimatologyState c = small_state();
  c.lon.values[2] = -27.5;
  CHECK_THROWS_WITH_AS(a.merge(c), doctest::Contains("grid differs"), InputError);
  ClimatologyState d = small_state(ClimatologyPeriod::month);
  CHECK_THROWS_WITH_AS(a.merge(d), doctest::Contains("--by month"), InputError);
  ClimatologyState e = small_state();
  e.settings[0].values = {4};
  CHECK_THROWS_WITH_AS(a.merge(e), doctest::Contains("geostrophy settings"), InputError);
  ClimatologyState f = small_state();
  f.calendar = "noleap";
  CHECK_THROWS_AS(a.merge(f), InputError);
}

TEST_CASE("partial state: written and read back exactly; refused by accumulate") {
  TempDir tmp;
  ClimatologyState st = small_state(ClimatologyPeriod::season);
  std::mt19937_64 rng(3);
  std::normal_distribution<double> g(0.0, 1.0);
  std::vector<double> u(6), v(6), z(6);
  for (int k = 0; k < 40; ++k) {
    for (int c = 0; c < 6; ++c) u[c] = g(rng), v[c] = g(rng), z[c] = 1e-5 * g(rng);
    // Periods 1..3 get samples; period 0 (DJF) stays empty and is not stored.
    st.moments.add(static_cast<std::size_t>(1 + k % 3), 0, 6, u.data(), v.data(), z.data());
  }
  st.records[1] = {20, Ymd{2001, 3, 2}, Ymd{2003, 5, 31}};
  st.records[2] = {10, Ymd{2001, 6, 2}, Ymd{2003, 8, 31}};
  st.records[3] = {10, Ymd{2001, 9, 2}, Ymd{2003, 11, 30}};
  st.inputs = 17;
  ClimatologyOutputOptions out;
  out.path = (tmp.path / "part.nc").string();
  out.command_line = "test";
  write_partial(st, out);
  CHECK(is_partial_file(out.path));
  const ClimatologyState back = read_partial(out.path);
  CHECK(back.period == ClimatologyPeriod::season);
  CHECK(back.calendar == "standard");
  CHECK(back.kind == HeightKind::anomaly);
  CHECK(back.inputs == 17);
  CHECK(back.first_input == "synthetic.nc");
  CHECK(back.lat.values == st.lat.values);
  CHECK(back.lon.values == st.lon.values);
  CHECK(back.moments.count == st.moments.count);
  CHECK(back.moments.m2_u == st.moments.m2_u);  // bit for bit
  CHECK(back.moments.comoment_uv == st.moments.comoment_uv);
  CHECK(back.moments.mean_vorticity == st.moments.mean_vorticity);
  CHECK(back.records[1].steps == 20);
  CHECK(*back.records[1].last == Ymd{2003, 5, 31});
  CHECK(!back.records[0].first);
  CHECK(back.records[0].steps == 0);
  CHECK(back.moments.count[0] == 0);  // the unwritten period reads back as the empty state
  CHECK(back.moments.mean_u[0] == 0.0);
  CHECK(back.settings.size() == 2);

  // An existing output is refused without --force, and nothing else is left.
  CHECK_THROWS_AS(write_partial(st, out), OutputError);
  out.force = true;
  write_partial(st, out);
  std::size_t files = 0;
  for ([[maybe_unused]] const auto& e : fs::directory_iterator(tmp.path)) ++files;
  CHECK(files == 1);

  ClimatologyState target;
  ClimatologyJob job;
  CHECK_THROWS_WITH_AS(accumulate(out.path, job, target), doctest::Contains("seatilt merge"),
                       InputError);
  CHECK_THROWS_AS(read_partial((tmp.path / "missing.nc").string()), InputError);
}

TEST_CASE("climatology output: bounds and metadata of a monthly state") {
  TempDir tmp;
  ClimatologyState st = small_state(ClimatologyPeriod::month);
  st.calendar = "360_day";
  const double u[6] = {0.1, 0.2, 0.3, 0.4, 0.5, 0.6}, v[6] = {0, 0, 0, 0, 0, 0};
  st.moments.add(0, 0, 6, u, v, nullptr);
  st.records[0] = {1, Ymd{2001, 1, 30}, Ymd{2003, 1, 3}};
  ClimatologyOutputOptions out;
  out.path = (tmp.path / "clim.nc").string();
  out.command_line = "test";
  write_climatology(st, out);
  int nc = -1, vt = -1, vb = -1;
  REQUIRE(nc_open(out.path.c_str(), NC_NOWRITE, &nc) == NC_NOERR);
  REQUIRE(nc_inq_varid(nc, "time", &vt) == NC_NOERR);
  REQUIRE(nc_inq_varid(nc, "climatology_bounds", &vb) == NC_NOERR);
  char units[64] = {0};
  REQUIRE(nc_get_att_text(nc, vt, "units", units) == NC_NOERR);
  CHECK(std::string(units) == "days since 2001-01-01 00:00:00");
  std::vector<double> b(24), t(12);
  REQUIRE(nc_get_var_double(nc, vb, b.data()) == NC_NOERR);
  REQUIRE(nc_get_var_double(nc, vt, t.data()) == NC_NOERR);
  // January: 2001-01-01 .. 2003-02-01 in 360_day = 0 .. 2*360 + 30 days (CF 7.4);
  // time = middle of January 2001 = day 15.
  CHECK(b[0] == 0.0);
  CHECK(b[1] == 750.0);
  CHECK(t[0] == 15.0);
  // Empty months take the record's years: December 2001-12-01 .. 2004-01-01.
  CHECK(b[22] == 330.0);
  CHECK(b[23] == 3 * 360.0);
  nc_close(nc);
  // A state without any selected step cannot be written.
  ClimatologyState none = small_state();
  ClimatologyOutputOptions none_out;
  none_out.path = (tmp.path / "x.nc").string();
  CHECK_THROWS_WITH_AS(write_climatology(none, none_out), doctest::Contains("no time step"),
                       InputError);
  CHECK(!fs::exists(tmp.path / "x.nc"));
  out.min_valid = 1.5;
  CHECK_THROWS_AS(write_climatology(st, out), UsageError);
}

TEST_CASE("reduce_states without MPI is the identity") {
  ParallelSession session;
  CHECK(session.size() == 1);
  CHECK(session.owns(0));
  CHECK(session.owns(7));
  ClimatologyState st = small_state();
  const ReduceFailure f = reduce_states(session, st);
  CHECK(f.code == 0);
  CHECK(st.inputs == 1);
  CHECK(session.batch_exit_code(0, 3, 0) == 0);
  CHECK(session.batch_exit_code(3, 3, 4) == 4);
  CHECK(session.batch_exit_code(1, 3, 3) == 5);
}
