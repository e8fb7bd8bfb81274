// Projected and curvilinear grids: Projection and CurvilinearGrid (grid.hpp),
// CurvilinearGeostrophicKernel (kernel.hpp), CurvilinearKinematicsKernel
// (diagnostics.hpp). Reference values: GeographicLib 2.1 (an independent
// implementation of the projections and of geodesics), REFERENCES.md §2, §4,
// §6, §7, and the closed-form analytic eddy of tests/analytic.hpp.
#include <doctest/doctest.h>

#include <GeographicLib/Constants.hpp>
#include <GeographicLib/Geodesic.hpp>
#include <GeographicLib/LambertConformalConic.hpp>
#include <GeographicLib/PolarStereographic.hpp>
#include <GeographicLib/TransverseMercator.hpp>
#include <cmath>
#include <stdexcept>
#include <string>
#include <vector>

#include "analytic.hpp"
#include "seatilt/diagnostics.hpp"
#include "seatilt/grid.hpp"
#include "seatilt/kernel.hpp"

using namespace seatilt;

namespace {
constexpr double pi = 3.14159265358979323846;
constexpr double deg = pi / 180;

GridMapping mapping(const std::string& name, std::map<std::string, std::vector<double>> numbers) {
  GridMapping m;
  m.variable = "crs";
  m.texts["grid_mapping_name"] = name;
  m.numbers = std::move(numbers);
  return m;
}

// EPSG:3413 polar stereographic north (lat_ts 70, lon_0 -45) on WGS84.
GridMapping nsidc_north() {
  return mapping("polar_stereographic", {{"latitude_of_projection_origin", {90.0}},
                                         {"straight_vertical_longitude_from_pole", {-45.0}},
                                         {"standard_parallel", {70.0}},
                                         {"false_easting", {0.0}},
                                         {"false_northing", {0.0}},
                                         {"semi_major_axis", {6378137.0}},
                                         {"inverse_flattening", {298.257223563}}});
}

// Same CRS as WKT2, from `projinfo EPSG:3413 -o WKT2_2019` (PROJ 9.1.1), trimmed of
// its usage and datum ensemble members (not needed for the geometry).
const char* nsidc_wkt =
    "PROJCRS[\"WGS 84 / NSIDC Sea Ice Polar Stereographic North\",BASEGEOGCRS[\"WGS 84\","
    "DATUM[\"World Geodetic System 1984\",ELLIPSOID[\"WGS 84\",6378137,298.257223563,"
    "LENGTHUNIT[\"metre\",1]]],PRIMEM[\"Greenwich\",0,ANGLEUNIT[\"degree\",0.0174532925199433]]],"
    "CONVERSION[\"US NSIDC Sea Ice polar stereographic north\",METHOD[\"Polar Stereographic "
    "(variant B)\",ID[\"EPSG\",9829]],PARAMETER[\"Latitude of standard parallel\",70,"
    "ANGLEUNIT[\"degree\",0.0174532925199433],ID[\"EPSG\",8832]],PARAMETER[\"Longitude of "
    "origin\",-45,ANGLEUNIT[\"degree\",0.0174532925199433],ID[\"EPSG\",8833]],PARAMETER[\"False "
    "easting\",0,LENGTHUNIT[\"metre\",1],ID[\"EPSG\",8806]],PARAMETER[\"False northing\",0,"
    "LENGTHUNIT[\"metre\",1],ID[\"EPSG\",8807]]],CS[Cartesian,2],AXIS[\"easting (X)\",south,"
    "MERIDIAN[45,ANGLEUNIT[\"degree\",0.0174532925199433]],ORDER[1],LENGTHUNIT[\"metre\",1]],"
    "AXIS[\"northing (Y)\",south,MERIDIAN[135,ANGLEUNIT[\"degree\",0.0174532925199433]],"
    "ORDER[2],LENGTHUNIT[\"metre\",1]]]";

std::vector<double> axis_around(double centre, int half, double step) {
  std::vector<double> a;
  for (int k = -half; k <= half; ++k) a.push_back(centre + k * step);
  return a;
}

// A square projected grid of (2 half + 1)^2 nodes, spacing STEP (m), centred
// on the projection of (LAT0, LON0).
CurvilinearGrid square_grid(const GridMapping& m, double lat0, double lon0, int half, double step) {
  Projection p(m);
  double xc = 0, yc = 0;
  p.forward(lat0, lon0, xc, yc);
  REQUIRE(std::isfinite(xc));
  return CurvilinearGrid(m, axis_around(xc, half, step), axis_around(yc, half, step));
}

struct Run {
  Field u, v;
  std::vector<std::uint8_t> flags;
  Kinematics kin;
};

Run run_all(const CurvilinearGrid& g, const Field& eta, const CurrentsOptions& o) {
  CurvilinearGeostrophicKernel k(g, o);
  Run r;
  k.compute(eta, 0, 0, g.ny(), r.u, r.v, r.flags);
  CurvilinearKinematicsKernel kk(g, o.order, o.coast);
  kk.compute(r.u, r.v, 0, 0, g.ny(), r.kin, r.flags);
  return r;
}

template <class F>
Field sample(const CurvilinearGrid& g, F f) {
  Field out(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i)
      out.at(j, i) = f(g.lat_deg(j, i) * deg, g.lon_deg(j, i) * deg);
  return out;
}

// A sphere of radius R1 for the analytic eddy of analytic.hpp (CF earth_radius).
GridMapping on_sphere(GridMapping m) {
  m.numbers.erase("semi_major_axis");
  m.numbers.erase("inverse_flattening");
  m.numbers["earth_radius"] = {earth::mean_radius};
  return m;
}

struct EddyErrors {
  double uv = 0, zeta = 0, strain = 0;  // max abs errors within 1.2 ell of the centre
  double umax = 0, zmax = 0;
};

// Analytic eddy of analytic.hpp centred at (lat0, lon0) on the grid of M.
EddyErrors eddy_errors(const GridMapping& m, double lat0, double lon0, double step, int order) {
  analytic::Eddy e;
  e.p0 = lat0 * deg;
  e.l0 = lon0 * deg;
  const int half = static_cast<int>(std::ceil(4 * e.ell * e.R / step));
  const CurvilinearGrid g = square_grid(on_sphere(m), lat0, lon0, half, step);
  CurrentsOptions o;
  o.order = order;
  const Field eta = sample(g, [&](double p, double l) { return e.eta(p, l); });
  const Run r = run_all(g, eta, o);
  EddyErrors err;
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) {
      const double p = g.lat_deg(j, i) * deg;
      double l = g.lon_deg(j, i) * deg;
      l = e.l0 + std::remainder(l - e.l0, 2 * pi);
      const double a = p - e.p0, b = (l - e.l0) * e.c0();
      if (a * a + b * b > 1.44 * e.ell * e.ell) continue;
      REQUIRE(r.flags[j * g.nx() + i] == 0);
      err.uv = std::max(err.uv, std::fabs(r.u.at(j, i) - e.u(p, l)));
      err.uv = std::max(err.uv, std::fabs(r.v.at(j, i) - e.v(p, l)));
      err.zeta = std::max(err.zeta, std::fabs(r.kin.vorticity.at(j, i) - e.zeta(p, l)));
      err.strain = std::max(err.strain, std::fabs(r.kin.strain_normal.at(j, i) - e.sn(p, l)));
      err.strain = std::max(err.strain, std::fabs(r.kin.strain_shear.at(j, i) - e.ss(p, l)));
      err.umax = std::max(err.umax, std::hypot(e.u(p, l), e.v(p, l)));
      err.zmax = std::max(err.zmax, std::fabs(e.zeta(p, l)));
    }
  return err;
}

GridMapping laea_mapping() {
  return mapping("lambert_azimuthal_equal_area", {{"latitude_of_projection_origin", {60.0}},
                                                  {"longitude_of_projection_origin", {-20.0}},
                                                  {"false_easting", {4321000.0}},
                                                  {"false_northing", {3210000.0}}});
}

GridMapping south_mapping() {
  // EPSG:3031 Antarctic polar stereographic: lat_ts -71, lon_0 0.
  return mapping("polar_stereographic", {{"latitude_of_projection_origin", {-90.0}},
                                         {"longitude_of_projection_origin", {0.0}},
                                         {"standard_parallel", {-71.0}}});
}

}  // namespace

TEST_CASE("Ellipsoid radii agree with the earth models and REFERENCES.md §4") {
  const Ellipsoid w = ellipsoid_of(EarthModel::wgs84), s = ellipsoid_of(EarthModel::sphere);
  for (double lat : {-80.0, -30.0, 0.0, 45.0, 89.0}) {
    CHECK(meridional_radius(w, lat * deg) ==
          doctest::Approx(meridional_radius(EarthModel::wgs84, lat * deg)).epsilon(1e-15));
    CHECK(prime_vertical_radius(w, lat * deg) ==
          doctest::Approx(prime_vertical_radius(EarthModel::wgs84, lat * deg)).epsilon(1e-15));
    CHECK(meridional_radius(s, lat * deg) == earth::mean_radius);
  }
  // Per degree at 45 N: dy 111131.777 m, dx 78846.835 m (REFERENCES.md §4, computed)
  CHECK(meridional_radius(w, 45 * deg) * deg == doctest::Approx(111131.777).epsilon(1e-8));
  CHECK(prime_vertical_radius(w, 45 * deg) * std::cos(45 * deg) * deg ==
        doctest::Approx(78846.835).epsilon(1e-8));
}

TEST_CASE("Polar stereographic north and south against GeographicLib") {
  using GeographicLib::PolarStereographic;
  const double a = GeographicLib::Constants::WGS84_a(), f = GeographicLib::Constants::WGS84_f();
  struct Case {
    GridMapping m;
    bool north;
    double lat_ts, lon0;
  };
  GridMapping s3031 = south_mapping();
  const Case cases[] = {{nsidc_north(), true, 70, -45}, {s3031, false, -71, 0}};
  for (const Case& c : cases) {
    Projection p(c.m);
    PolarStereographic ps(a, f, 1);
    ps.SetScale(std::fabs(c.lat_ts), 1);  // k = 1 on the standard parallel
    const double lats[] = {c.north ? 75.0 : -70.0, c.north ? 62.5 : -60.0, c.north ? 88.0 : -85.0};
    for (double lat : lats)
      for (double lon : {-170.0, -45.0, 0.0, 33.3, 120.0}) {
        double x = 0, y = 0, gx = 0, gy = 0, gamma = 0, k = 0;
        p.forward(lat, lon, x, y);
        ps.Forward(c.north, lat, lon - c.lon0, gx, gy, gamma, k);
        CHECK(x == doctest::Approx(gx).epsilon(1e-9));  // GeographicLib: same x, y convention
        CHECK(y == doctest::Approx(gy).epsilon(1e-9));
        const ProjectionFactors fa = p.factors(x, y);
        CHECK(fa.lat_deg == doctest::Approx(lat).epsilon(1e-12));
        CHECK(std::remainder(fa.lon_deg - lon, 360.0) == doctest::Approx(0).epsilon(1e-9));
        CHECK(fa.parallel_scale == doctest::Approx(k).epsilon(1e-9));  // conformal: h = k
        CHECK(fa.meridional_scale == doctest::Approx(k).epsilon(1e-9));
        CHECK(std::remainder(fa.convergence_deg - gamma, 360.0) ==
              doctest::Approx(0).epsilon(1e-7));
      }
  }
  // REFERENCES.md §7: polar stereographic (lat_0 90, lon_0 -45) at (0 E, 70 N): gamma = 45 deg.
  Projection p(nsidc_north());
  double x = 0, y = 0;
  p.forward(70, 0, x, y);
  CHECK(p.factors(x, y).convergence_deg == doctest::Approx(45.0).epsilon(1e-9));
  CHECK(p.factors(x, y).parallel_scale == doctest::Approx(1.0).epsilon(1e-9));  // true scale at 70
  CHECK(p.name() == "polar_stereographic");
}

TEST_CASE("Transverse Mercator: UTM zone 31 check value (REFERENCES.md §7)") {
  const GridMapping m =
      mapping("transverse_mercator", {{"longitude_of_central_meridian", {3.0}},
                                      {"latitude_of_projection_origin", {0.0}},
                                      {"scale_factor_at_central_meridian", {0.9996}},
                                      {"false_easting", {500000.0}},
                                      {"false_northing", {0.0}}});
  Projection p(m);
  double x = 0, y = 0;
  p.forward(45, 5, x, y);
  const ProjectionFactors fa = p.factors(x, y);
  // UTM zone 31 at (5 E, 45 N): gamma = 1.41450370 deg, k = 0.99990554 [computed, REFERENCES §7]
  CHECK(fa.convergence_deg == doctest::Approx(1.41450370).epsilon(1e-8));
  CHECK(fa.parallel_scale == doctest::Approx(0.99990554).epsilon(1e-8));
  // and against GeographicLib's Krueger series (UTM)
  const GeographicLib::TransverseMercator& tm = GeographicLib::TransverseMercator::UTM();
  double gx = 0, gy = 0, gamma = 0, k = 0;
  tm.Forward(3, 45, 5, gx, gy, gamma, k);
  CHECK(x == doctest::Approx(gx + 500000).epsilon(1e-10));
  CHECK(y == doctest::Approx(gy).epsilon(1e-10));
  CHECK(fa.convergence_deg == doctest::Approx(gamma).epsilon(1e-9));
}

TEST_CASE("Lambert conformal conic against GeographicLib") {
  const GridMapping m =
      mapping("lambert_conformal_conic", {{"standard_parallel", {60.0, 30.0}},
                                          {"longitude_of_central_meridian", {10.0}},
                                          {"latitude_of_projection_origin", {45.0}}});
  Projection p(m);
  GeographicLib::LambertConformalConic lcc(GeographicLib::Constants::WGS84_a(),
                                           GeographicLib::Constants::WGS84_f(), 60, 30, 1);
  double x0 = 0, y0 = 0, g0 = 0, k0 = 0;
  lcc.Forward(10, 45, 10, x0, y0, g0, k0);  // the origin of PROJ's x, y
  for (double lat : {35.0, 52.0, 68.0})
    for (double lon : {-20.0, 10.0, 25.0}) {
      double x = 0, y = 0, gx = 0, gy = 0, gamma = 0, k = 0;
      p.forward(lat, lon, x, y);
      lcc.Forward(10, lat, lon, gx, gy, gamma, k);
      CHECK(x == doctest::Approx(gx - x0).epsilon(1e-9));
      CHECK(y == doctest::Approx(gy - y0).epsilon(1e-9));
      const ProjectionFactors fa = p.factors(x, y);
      CHECK(fa.parallel_scale == doctest::Approx(k).epsilon(1e-9));
      CHECK(fa.convergence_deg == doctest::Approx(gamma).epsilon(1e-8));
    }
}

TEST_CASE("Grid mapping errors name the problem") {
  const auto refuses = [](const GridMapping& m, const char* words) {
    try {
      Projection p(m);
      FAIL("accepted: " << words);
    } catch (const std::invalid_argument& e) {
      CHECK_MESSAGE(std::string(e.what()).find(words) != std::string::npos, e.what());
    }
  };
  refuses(mapping("polar_stereo", {}), "unknown grid_mapping_name \"polar_stereo\"");
  refuses(mapping("rotated_latitude_longitude", {}), "not supported for x/y grids");
  GridMapping m = nsidc_north();
  m.numbers["latitude_of_projection_origin"] = {60.0};
  refuses(m, "needs latitude_of_projection_origin +90 or -90");
  m = nsidc_north();
  m.numbers["standard_parallel"] = {-70.0};
  refuses(m, "not in the hemisphere");
  m = nsidc_north();
  m.numbers["scale_factor_at_projection_origin"] = {0.97};
  refuses(m, "disagree (the standard parallel implies 0.9698581");
  m.numbers["scale_factor_at_projection_origin"] = {0.969858190326};  // GeographicLib CentralScale
  CHECK_NOTHROW(Projection{m});  // both given and consistent: accepted
  m = nsidc_north();
  m.numbers.erase("standard_parallel");
  refuses(m, "needs standard_parallel or scale_factor_at_projection_origin");
  m = nsidc_north();
  m.numbers["semi_minor_axis"] = {6356000.0};
  refuses(m, "semi_minor_axis (6356000 m) and inverse_flattening");
  m = nsidc_north();
  m.numbers["semi_major_axis"] = {6378.137};
  refuses(m, "is not an earth radius");
  m = nsidc_north();
  m.numbers["false_easting"] = {std::nan("")};
  refuses(m, "false_easting is not finite");
  refuses(mapping("lambert_conformal_conic", {{"longitude_of_central_meridian", {10.0}},
                                              {"latitude_of_projection_origin", {45.0}}}),
          "standard_parallel is missing");
  refuses(mapping("lambert_azimuthal_equal_area", {{"latitude_of_projection_origin", {95.0}},
                                                   {"longitude_of_projection_origin", {0.0}}}),
          "outside -90..90");
  GridMapping w;
  w.variable = "crs";
  w.texts["crs_wkt"] = "PROJCRS[nonsense";
  refuses(w, "crs_wkt is not a CRS PROJ can read");
  w.texts["crs_wkt"] =
      "GEOGCRS[\"WGS 84\",DATUM[\"World Geodetic System 1984\",ELLIPSOID[\"WGS 84\","
      "6378137,298.257223563]],CS[ellipsoidal,2],AXIS[\"latitude\",north,"
      "ANGLEUNIT[\"degree\",0.0174532925199433]],AXIS[\"longitude\",east,"
      "ANGLEUNIT[\"degree\",0.0174532925199433]]]";
  refuses(w, "not a projected CRS");
  refuses(GridMapping{}, "neither grid_mapping_name nor crs_wkt");
}

TEST_CASE("crs_wkt alone gives the projection of the CF attributes; disagreement is refused") {
  GridMapping w;
  w.variable = "crs";
  w.texts["crs_wkt"] = nsidc_wkt;
  const std::vector<double> x = axis_around(-1.0e6, 5, 25000), y = axis_around(-0.5e6, 4, 25000);
  const CurvilinearGrid gw(w, x, y), gc(nsidc_north(), x, y);
  for (std::size_t k = 0; k < gw.lat_deg().size(); ++k) {
    CHECK(gw.lat_deg()[k] == doctest::Approx(gc.lat_deg()[k]).epsilon(1e-12));
    CHECK(gw.lon_deg()[k] == doctest::Approx(gc.lon_deg()[k]).epsilon(1e-12));
  }
  CHECK(gw.projection()->name() == "Polar Stereographic (variant B)");
  // Both given and consistent: fine. Inconsistent (another lon_0): refused.
  GridMapping both = nsidc_north();
  both.texts["crs_wkt"] = nsidc_wkt;
  CHECK_NOTHROW(CurvilinearGrid(both, x, y));
  both.numbers["straight_vertical_longitude_from_pole"] = {-40.0};
  CHECK_THROWS_WITH_AS(CurvilinearGrid(both, x, y),
                       doctest::Contains("grid_mapping attributes and crs_wkt disagree"),
                       std::invalid_argument);
  // CF attributes without an ellipsoid take it from crs_wkt.
  GridMapping bare = nsidc_north();
  bare.numbers.erase("semi_major_axis");
  bare.numbers.erase("inverse_flattening");
  bare.texts["crs_wkt"] = nsidc_wkt;
  CHECK(Projection(bare).ellipsoid().a == 6378137.0);
}

TEST_CASE("Projected metric against geodesics between neighbouring positions") {
  // B = d(X,Y)/d(e,n)^T from PROJ; D = d(e,n)/d(X,Y) from GeographicLib geodesics
  // (Karney 2013) to points 1 m away in x and y: B^T D = identity.
  const GeographicLib::Geodesic& geod = GeographicLib::Geodesic::WGS84();
  const GridMapping maps[] = {nsidc_north(), south_mapping(), laea_mapping()};
  const double where[][2] = {{75, 30}, {-70, 100}, {55, -30}};
  for (int k = 0; k < 3; ++k) {
    const CurvilinearGrid g = square_grid(maps[k], where[k][0], where[k][1], 2, 20000);
    const Projection& p = *g.projection();
    const std::size_t j = 1, i = 3;
    const double x = g.col_coord()[i], y = g.row_coord()[j];
    double d[2][2];  // d[e|n][X|Y]
    for (int c = 0; c < 2; ++c) {
      const double h = 1.0;
      double la1 = 0, lo1 = 0, la2 = 0, lo2 = 0, s12 = 0, az1 = 0, az2 = 0;
      p.inverse(x - (c == 0 ? h : 0), y - (c == 1 ? h : 0), la1, lo1);
      p.inverse(x + (c == 0 ? h : 0), y + (c == 1 ? h : 0), la2, lo2);
      geod.Inverse(la1, lo1, la2, lo2, s12, az1, az2);
      const double az = (az1 + az2) / 2 * deg;  // azimuth at the midpoint (the node)
      d[0][c] = s12 * std::sin(az) / (2 * h);
      d[1][c] = s12 * std::cos(az) / (2 * h);
    }
    const DirectionalMetric& b = g.metric(j, i);
    // B^T D: rows X, Y; columns X, Y. B^T = (e_c n_c; e_r n_r).
    CHECK(b.e_c * d[0][0] + b.n_c * d[1][0] == doctest::Approx(1).epsilon(1e-6));
    CHECK(b.e_c * d[0][1] + b.n_c * d[1][1] == doctest::Approx(0).epsilon(1e-6));
    CHECK(b.e_r * d[0][0] + b.n_r * d[1][0] == doctest::Approx(0).epsilon(1e-6));
    CHECK(b.e_r * d[0][1] + b.n_r * d[1][1] == doctest::Approx(1).epsilon(1e-6));
  }
}

TEST_CASE("2-D latitude/longitude: regular grid metric and geodesic distances") {
  // A regular 0.25 deg grid given as 2-D arrays: B is diagonal with
  // 1/(N cos phi dlam) and 1/(M dphi) per index (grid.hpp; REFERENCES.md §4).
  const std::size_t ny = 12, nx = 15;
  std::vector<double> lat(ny * nx), lon(ny * nx);
  for (std::size_t j = 0; j < ny; ++j)
    for (std::size_t i = 0; i < nx; ++i) {
      lat[j * nx + i] = 40.0 + 0.25 * static_cast<double>(j);
      lon[j * nx + i] = 178.0 + 0.25 * static_cast<double>(i);  // crosses 180: wrapped
      if (lon[j * nx + i] > 180) lon[j * nx + i] -= 360;
    }
  const CurvilinearGrid g(ny, nx, lat, lon, EarthModel::wgs84);
  const Ellipsoid w = ellipsoid_of(EarthModel::wgs84);
  for (std::size_t j : {std::size_t{0}, std::size_t{5}, ny - 1})
    for (std::size_t i : {std::size_t{0}, std::size_t{7}, nx - 1}) {
      const double phi = g.lat_deg(j, i) * deg;
      const DirectionalMetric& b = g.metric(j, i);
      const double tol = (j == 0 || i == 0 || j == ny - 1 || i == nx - 1) ? 1e-5 : 1e-9;
      CHECK(b.e_c * prime_vertical_radius(w, phi) * std::cos(phi) * 0.25 * deg ==
            doctest::Approx(1).epsilon(tol));
      CHECK(b.n_r * meridional_radius(w, phi) * 0.25 * deg == doctest::Approx(1).epsilon(tol));
      CHECK(std::fabs(b.e_r) * meridional_radius(w, phi) * 0.25 * deg < tol);
      CHECK(std::fabs(b.n_c) * meridional_radius(w, phi) * 0.25 * deg < tol);
    }
  // A rotated, sheared grid: the metric implies the geodesic distance to the
  // next node along each index direction (GeographicLib, Karney 2013) to O(h^2).
  std::vector<double> la2(ny * nx), lo2(ny * nx);
  for (std::size_t j = 0; j < ny; ++j)
    for (std::size_t i = 0; i < nx; ++i) {
      la2[j * nx + i] = 60.0 + 0.05 * static_cast<double>(j) + 0.02 * static_cast<double>(i);
      lo2[j * nx + i] = -10.0 + 0.08 * static_cast<double>(i) - 0.03 * static_cast<double>(j);
    }
  const CurvilinearGrid r(ny, nx, la2, lo2, EarthModel::wgs84);
  const GeographicLib::Geodesic& geod = GeographicLib::Geodesic::WGS84();
  const std::size_t j = 5, i = 6;
  const DirectionalMetric& b = r.metric(j, i);
  // D = B^-T: column i of D = displacement per index (east, north).
  const double det = b.e_c * b.n_r - b.e_r * b.n_c;
  const double ei = b.n_r / det, ni = -b.e_r / det, ej = -b.n_c / det, nj = b.e_c / det;
  double s = 0, a1 = 0, a2 = 0;
  geod.Inverse(la2[j * nx + i - 1], lo2[j * nx + i - 1], la2[j * nx + i + 1], lo2[j * nx + i + 1],
               s, a1, a2);
  CHECK(std::hypot(ei, ni) == doctest::Approx(s / 2).epsilon(1e-6));
  CHECK(std::atan2(ei, ni) / deg == doctest::Approx((a1 + a2) / 2).epsilon(1e-5));
  geod.Inverse(la2[(j - 1) * nx + i], lo2[(j - 1) * nx + i], la2[(j + 1) * nx + i],
               lo2[(j + 1) * nx + i], s, a1, a2);
  CHECK(std::hypot(ej, nj) == doctest::Approx(s / 2).epsilon(1e-6));
  CHECK(std::atan2(ej, nj) / deg == doctest::Approx((a1 + a2) / 2).epsilon(1e-5));
}

TEST_CASE("2-D latitude/longitude errors") {
  std::vector<double> lat = {10, 10, 11, 11}, lon = {0, 1, 0, 1};
  CHECK_NOTHROW(CurvilinearGrid(2, 2, lat, lon, EarthModel::sphere));
  lat[2] = std::nan("");
  CHECK_THROWS_WITH_AS(CurvilinearGrid(2, 2, lat, lon, EarthModel::sphere),
                       doctest::Contains("missing or non-finite value at node (row 1, column 0)"),
                       std::invalid_argument);
  lat = {10, 10, 11, 11};
  lon = {0, 0, 0, 0};  // columns coincide
  CHECK_THROWS_WITH_AS(CurvilinearGrid(2, 2, lat, lon, EarthModel::sphere),
                       doctest::Contains("do not form a grid"), std::invalid_argument);
  CHECK_THROWS_AS(CurvilinearGrid(2, 3, lat, lon, EarthModel::sphere), std::invalid_argument);
}

TEST_CASE("Analytic eddy on polar stereographic (75 N, 70 S) and LAEA grids") {
  // analytic.hpp eddy (A 0.2 m, ell 0.015 rad ~ 96 km) on a sphere of radius R1;
  // u, v, zeta and strain converge at the order of the stencil.
  const GridMapping north = nsidc_north(), south = south_mapping(), laea = laea_mapping();
  struct Where {
    const GridMapping* m;
    double lat, lon;
  };
  const Where cases[] = {{&north, 75, 30}, {&south, -70, 140}, {&laea, 52, -5}};
  for (const Where& c : cases) {
    const EddyErrors e2a = eddy_errors(*c.m, c.lat, c.lon, 8000, 2);
    const EddyErrors e2b = eddy_errors(*c.m, c.lat, c.lon, 4000, 2);
    const EddyErrors e4 = eddy_errors(*c.m, c.lat, c.lon, 8000, 4);
    INFO("case at " << c.lat << ", " << c.lon);
    // Second order: 3-point truncation error (kh)^2/6 ~ 1 % of the speed at 8 km.
    CHECK(e2a.uv < 0.02 * e2a.umax);
    CHECK(e2a.uv / e2b.uv == doctest::Approx(4).epsilon(0.1));  // halving h: error / 4
    CHECK(e4.uv < 0.1 * e2a.uv);                                // 5-point far better
    CHECK(e2a.zeta < 0.05 * e2a.zmax);
    CHECK(e2a.zeta / e2b.zeta == doctest::Approx(4).epsilon(0.15));
    CHECK(e2a.strain / e2b.strain == doctest::Approx(4).epsilon(0.15));
  }
}

TEST_CASE("Eastward jet: v = 0 and u = -(g/(f M)) A cos(phi) (rotation check)") {
  // eta = A sin(phi) (smooth through the pole): a purely eastward flow
  // u = -(g/(f M)) A cos(phi), v = 0, on WGS84 polar stereographic north (around
  // 75 N and across the pole), south, and LAEA. The pole node is masked_pole.
  const double A = 0.5;
  const GridMapping north = nsidc_north(), south = south_mapping(), laea = laea_mapping();
  struct Where {
    const GridMapping* m;
    double lat, lon;
    int half;
  };
  const Where cases[] = {
      {&north, 75, 30, 20}, {&north, 90, 0, 10}, {&south, -70, -60, 20}, {&laea, 60, -20, 20}};
  for (const Where& c : cases) {
    const CurvilinearGrid g = square_grid(*c.m, c.lat, c.lon, c.half, 10000);
    CurrentsOptions o;
    const Field eta = sample(g, [&](double p, double) { return A * std::sin(p); });
    const Run r = run_all(g, eta, o);
    double vmax = 0, urel = 0;
    std::size_t poles = 0;
    for (std::size_t j = 0; j < g.ny(); ++j)
      for (std::size_t i = 0; i < g.nx(); ++i) {
        const std::uint8_t fl = r.flags[j * g.nx() + i];
        if (fl & quality::masked_pole) {
          ++poles;
          continue;
        }
        if (fl != 0) continue;
        const double phi = g.lat_deg(j, i) * deg;
        const double u = -earth::standard_gravity /
                         (coriolis(g.lat_deg(j, i)) * meridional_radius(g.ellipsoid(), phi)) * A *
                         std::cos(phi);
        vmax = std::max(vmax, std::fabs(r.v.at(j, i)) / std::fabs(u));
        urel = std::max(urel, std::fabs(r.u.at(j, i) / u - 1));
      }
    INFO("case at " << c.lat << ", " << c.lon);
    CHECK(poles == (c.lat == 90 ? 1u : 0u));
    CHECK(vmax < 1e-6);  // v vanishes to truncation error (smooth field, 10 km spacing)
    CHECK(urel < 2e-5);
  }
}

TEST_CASE("Kinematics: zonal flow and solid-body rotation on a polar grid") {
  // Sphere R1 (REFERENCES.md §6): u = U cos(phi), v = 0 gives zeta = 2 U sin(phi)/R and
  // no strain; solid-body rotation about an axis through (30 N, 10 E) has no strain
  // and zeta = 2 Omega_s cos(angle to the axis).
  const CurvilinearGrid g = square_grid(on_sphere(nsidc_north()), 90, 0, 20, 20000);
  const double U = 0.3, R = earth::mean_radius, Om = 1e-6;
  const double ax[3] = {std::cos(30 * deg) * std::cos(10 * deg),
                        std::cos(30 * deg) * std::sin(10 * deg), std::sin(30 * deg)};
  for (int which = 0; which < 2; ++which) {
    Field u(g.ny(), g.nx()), v(g.ny(), g.nx());
    for (std::size_t j = 0; j < g.ny(); ++j)
      for (std::size_t i = 0; i < g.nx(); ++i) {
        const double p = g.lat_deg(j, i) * deg, l = g.lon_deg(j, i) * deg;
        if (g.at_pole(j, i)) {
          u.at(j, i) = v.at(j, i) = std::nan("");
          continue;
        }
        if (which == 0) {
          u.at(j, i) = U * std::cos(p);
          v.at(j, i) = 0;
        } else {
          // V = Om R (axis x r_hat), in east/north components
          const double rh[3] = {std::cos(p) * std::cos(l), std::cos(p) * std::sin(l), std::sin(p)};
          const double V[3] = {Om * R * (ax[1] * rh[2] - ax[2] * rh[1]),
                               Om * R * (ax[2] * rh[0] - ax[0] * rh[2]),
                               Om * R * (ax[0] * rh[1] - ax[1] * rh[0])};
          u.at(j, i) = -std::sin(l) * V[0] + std::cos(l) * V[1];
          v.at(j, i) = -std::sin(p) * std::cos(l) * V[0] - std::sin(p) * std::sin(l) * V[1] +
                       std::cos(p) * V[2];
        }
      }
    std::vector<std::uint8_t> flags(g.ny() * g.nx(), 0);
    Kinematics kin;
    CurvilinearKinematicsKernel(g, 4, CoastMethod::one_sided)
        .compute(u, v, 0, 0, g.ny(), kin, flags);
    double zerr = 0, smax = 0, zref = 0;
    for (std::size_t j = 0; j < g.ny(); ++j)
      for (std::size_t i = 0; i < g.nx(); ++i) {
        if (flags[j * g.nx() + i] != 0 || std::isnan(kin.vorticity.at(j, i))) continue;
        const double p = g.lat_deg(j, i) * deg, l = g.lon_deg(j, i) * deg;
        const double rh[3] = {std::cos(p) * std::cos(l), std::cos(p) * std::sin(l), std::sin(p)};
        const double z = which == 0 ? 2 * U * std::sin(p) / R
                                    : 2 * Om * (ax[0] * rh[0] + ax[1] * rh[1] + ax[2] * rh[2]);
        zref = std::max(zref, std::fabs(z));
        zerr = std::max(zerr, std::fabs(kin.vorticity.at(j, i) - z));
        smax = std::max(smax, kin.strain.at(j, i));
      }
    INFO("field " << which);
    CHECK(zerr < 1e-7 * zref);
    CHECK(smax < 1e-7 * zref);
  }
}

TEST_CASE("Equatorial beta plane on a transverse Mercator grid (REFERENCES.md §2)") {
  // eta = A exp(-y^2/L^2), y = R phi: u = (2 g A / (beta L^2)) exp(-y^2/L^2) at the equator
  // from the beta-plane form; A = 0.1 m, L = 300 km, sphere R1 -> u(0) = 0.95199 m/s.
  GridMapping m = mapping("transverse_mercator", {{"longitude_of_central_meridian", {-140.0}},
                                                  {"latitude_of_projection_origin", {0.0}},
                                                  {"scale_factor_at_central_meridian", {1.0}},
                                                  {"earth_radius", {earth::mean_radius}}});
  const CurvilinearGrid g(m, axis_around(0, 30, 10000), axis_around(0, 30, 10000));
  const double A = 0.1, L = 300e3, R = earth::mean_radius;
  const Field eta =
      sample(g, [&](double p, double) { return A * std::exp(-(R * p) * (R * p) / (L * L)); });
  for (EquatorMethod method : {EquatorMethod::beta, EquatorMethod::blend, EquatorMethod::mask}) {
    CurrentsOptions o;
    o.equator = method;
    o.order = 4;
    CurvilinearGeostrophicKernel k(g, o);
    CHECK(k.halo_rows() == (method == EquatorMethod::mask ? 2u : 4u));
    Run r;
    k.compute(eta, 0, 0, g.ny(), r.u, r.v, r.flags);
    const std::size_t c = 30 * g.nx() + 30;  // the node at (0, 0): on the equator
    CHECK(g.lat_deg(30, 30) == doctest::Approx(0).epsilon(1e-12));
    if (method == EquatorMethod::mask) {
      CHECK(r.flags[c] == quality::masked_equator);
      continue;
    }
    CHECK(r.flags[c] == (method == EquatorMethod::beta ? quality::beta_plane : quality::blended));
    CHECK(r.u.data[c] == doctest::Approx(0.95199).epsilon(1e-3));
    CHECK(std::fabs(r.v.data[c]) < 1e-6);
  }
}

TEST_CASE("Quality flags and band independence on a projected grid") {
  const CurvilinearGrid g = square_grid(nsidc_north(), 78, 10, 15, 12500);
  analytic::Eddy e;
  e.p0 = 78 * deg;
  e.l0 = 10 * deg;
  Field eta = sample(g, [&](double p, double l) { return e.eta(p, l); });
  eta.at(10, 10) = std::nan("");  // a land cell
  CurrentsOptions o;
  o.order = 4;
  const Run whole = run_all(g, eta, o);
  CHECK(whole.flags[10 * g.nx() + 10] == quality::missing_height);
  CHECK((whole.flags[10 * g.nx() + 11] & quality::one_sided) != 0);
  CHECK((whole.flags[0] & quality::one_sided) != 0);  // domain edge = coast
  CHECK(whole.flags[20 * g.nx() + 20] == 0);
  o.coast = CoastMethod::mask;
  const Run masked = run_all(g, eta, o);
  CHECK(masked.flags[10 * g.nx() + 11] == quality::masked_coast);
  o.coast = CoastMethod::one_sided;
  // Bands of 5 rows with the halos the kernels ask for: bit-identical.
  CurvilinearGeostrophicKernel k(g, o);
  CurvilinearKinematicsKernel kk(g, o.order, o.coast);
  const std::size_t hv = k.halo_rows(), hd = kk.halo_rows();
  for (std::size_t j0 = 0; j0 < g.ny(); j0 += 5) {
    const std::size_t n = std::min<std::size_t>(5, g.ny() - j0);
    const std::size_t v0 = j0 >= hd ? j0 - hd : 0, v1 = std::min(g.ny(), j0 + n + hd);
    const std::size_t e0 = v0 >= hv ? v0 - hv : 0, e1 = std::min(g.ny(), v1 + hv);
    Field band(e1 - e0, g.nx());
    for (std::size_t j = e0; j < e1; ++j)
      for (std::size_t i = 0; i < g.nx(); ++i) band.at(j - e0, i) = eta.at(j, i);
    Field u, v;
    std::vector<std::uint8_t> fl;
    k.compute(band, e0, v0, v1 - v0, u, v, fl);
    std::vector<std::uint8_t> f2(fl.begin() + static_cast<long>((j0 - v0) * g.nx()),
                                 fl.begin() + static_cast<long>((j0 - v0 + n) * g.nx()));
    Kinematics kin;
    kk.compute(u, v, v0, j0, n, kin, f2);
    for (std::size_t j = j0; j < j0 + n; ++j)
      for (std::size_t i = 0; i < g.nx(); ++i) {
        const double a = u.at(j - v0, i), b = whole.u.at(j, i);
        CHECK(((std::isnan(a) && std::isnan(b)) || a == b));
        const double z1 = kin.vorticity.at(j - j0, i), z2 = whole.kin.vorticity.at(j, i);
        CHECK(((std::isnan(z1) && std::isnan(z2)) || z1 == z2));
        CHECK(f2[(j - j0) * g.nx() + i] == whole.flags[j * g.nx() + i]);
      }
  }
}

TEST_CASE("Descending y (rows from the top, as many polar products store them)") {
  // The same nodes in reversed row order give the same u, v, vorticity per node
  // (derivatives by mapping: the row coordinate's own stencil carries the sign).
  const GridMapping m = nsidc_north();
  std::vector<double> x = axis_around(-1.2e6, 12, 12500), y = axis_around(-0.6e6, 10, 12500);
  std::vector<double> y_down(y.rbegin(), y.rend());
  const CurvilinearGrid up(m, x, y), down(m, x, y_down);
  analytic::Eddy e;
  e.p0 = 78 * deg;
  e.l0 = -22 * deg;
  e.ell = 0.01;
  const auto eddy = [&](double p, double l) { return e.eta(p, l); };
  CurrentsOptions o;
  o.order = 6;
  const Run a = run_all(up, sample(up, eddy), o), b = run_all(down, sample(down, eddy), o);
  const std::size_t ny = y.size(), nx = x.size();
  for (std::size_t j = 0; j < ny; ++j)
    for (std::size_t i = 0; i < nx; ++i) {
      const std::size_t jd = ny - 1 - j;
      CHECK(b.flags[jd * nx + i] == a.flags[j * nx + i]);
      CHECK(b.u.at(jd, i) == doctest::Approx(a.u.at(j, i)).epsilon(1e-12).scale(1e-3));
      CHECK(b.v.at(jd, i) == doctest::Approx(a.v.at(j, i)).epsilon(1e-12).scale(1e-3));
      CHECK(b.kin.vorticity.at(jd, i) ==
            doctest::Approx(a.kin.vorticity.at(j, i)).epsilon(1e-10).scale(1e-8));
    }
}
