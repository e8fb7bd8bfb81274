#include "seatilt/kernel.hpp"

#include <doctest/doctest.h>

#include <cmath>
#include <vector>

#include "analytic.hpp"
#include "seatilt/error.hpp"

using namespace seatilt;

namespace {
constexpr double pi = 3.14159265358979323846;
constexpr double deg = pi / 180;

struct Run {
  Field u, v;
  std::vector<std::uint8_t> flags;
};

Run run_full(const Grid& g, const Field& eta, const CurrentsOptions& o) {
  GeostrophicKernel k(g, o);
  Run r;
  k.compute(eta, 0, 0, g.ny(), r.u, r.v, r.flags);
  return r;
}

std::vector<double> axis(double lo, double hi, double step) {
  std::vector<double> a;
  for (double x = lo; x <= hi + 1e-9; x += step) a.push_back(x);
  return a;
}

// Max error of u and v against the analytic eddy inside 1.2 ell of the centre.
double eddy_error(double h_deg, int order, double centre_lat_deg) {
  analytic::Eddy e;
  e.p0 = centre_lat_deg * deg;
  const double half = 4 * e.ell / deg;
  Grid g(axis(centre_lat_deg - half, centre_lat_deg + half, h_deg),
         axis(e.l0 / deg - half / e.c0(), e.l0 / deg + half / e.c0(), h_deg));
  Field eta(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) eta.at(j, i) = e.eta(g.lat_rad()[j], g.lon_rad()[i]);
  CurrentsOptions o;
  o.order = order;
  o.earth = EarthModel::sphere;
  const Run r = run_full(g, eta, o);
  double err = 0;
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) {
      const double p = g.lat_rad()[j], l = g.lon_rad()[i];
      const double a = p - e.p0, b = (l - e.l0) * e.c0();
      if (a * a + b * b > 1.44 * e.ell * e.ell) continue;
      REQUIRE(r.flags[j * g.nx() + i] == 0);
      err = std::max(err, std::fabs(r.u.at(j, i) - e.u(p, l)));
      err = std::max(err, std::fabs(r.v.at(j, i) - e.v(p, l)));
    }
  return err;
}
}  // namespace

TEST_CASE("Gaussian eddy: u, v converge at the stencil's order (both hemispheres)") {
  for (double lat : {35.0, -35.0}) {
    CAPTURE(lat);
    // Order 2: error falls ~4x per halving of the spacing; order 4: ~16x
    // (Arbic et al. 2012; Taylor expansion of the centred stencils).
    const double e2a = eddy_error(0.1, 2, lat), e2b = eddy_error(0.05, 2, lat);
    CHECK(e2a / e2b == doctest::Approx(4.0).epsilon(0.08));
    const double e4a = eddy_error(0.1, 4, lat), e4b = eddy_error(0.05, 4, lat);
    CHECK(e4a / e4b == doctest::Approx(16.0).epsilon(0.12));
    const double e6a = eddy_error(0.1, 6, lat), e6b = eddy_error(0.05, 6, lat);
    CHECK(e6a / e6b > 40.0);  // order 6: 64x asymptotically
    CHECK(e6b < e4b);
    CHECK(e4b < e2b);
    // Absolute size: the 3-point stencil at 0.05 deg (~5.5 km) on an eddy of
    // e-folding ~95 km keeps errors below 1 mm/s.
    CHECK(e2b < 1e-3);
  }
}

TEST_CASE("Rule of thumb: 1 m per 100 km at 45 N gives 0.9509 m/s") {
  // REFERENCES.md §5 (computed): u = g/f * slope = 9.80665 / 1.031261e-4 * 1e-5.
  // A uniform northward slope of the height: eta = s * R * phi (sphere, exact for
  // any centred stencil since eta is linear in phi).
  const double s = 1.0 / 100e3;
  Grid g(axis(44, 46, 0.25), axis(10, 12, 0.25));
  Field eta(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) eta.at(j, i) = s * earth::mean_radius * g.lat_rad()[j];
  CurrentsOptions o;
  o.earth = EarthModel::sphere;
  const Run r = run_full(g, eta, o);
  const std::size_t jc = 4;  // 45 N
  CHECK(g.lat_deg()[jc] == doctest::Approx(45.0));
  CHECK(r.u.at(jc, 3) == doctest::Approx(-0.9509).epsilon(1e-4));  // height rises north -> westward
  CHECK(std::fabs(r.v.at(jc, 3)) < 1e-12);
  CHECK(r.flags[jc * g.nx() + 3] == 0);
  // Stewart, Introduction to Physical Oceanography, ch. 10: 10 cm/s at 30 deg
  // for a 7.4 cm rise per 100 km (exact with g0: 7.4359 cm, REFERENCES.md §5).
  Grid g30(axis(29, 31, 0.25), axis(10, 12, 0.25));
  Field eta30(g30.ny(), g30.nx());
  for (std::size_t j = 0; j < g30.ny(); ++j)
    for (std::size_t i = 0; i < g30.nx(); ++i)
      eta30.at(j, i) = 0.074359 / 100e3 * earth::mean_radius * g30.lat_rad()[j];
  const Run r30 = run_full(g30, eta30, o);
  CHECK(r30.u.at(4, 3) == doctest::Approx(-0.100).epsilon(1e-4));
}

TEST_CASE("Gravity models scale the velocity") {
  Grid g(axis(44, 46, 0.25), axis(10, 12, 0.25));
  Field eta(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) eta.at(j, i) = 1e-5 * earth::mean_radius * g.lat_rad()[j];
  CurrentsOptions o;
  o.earth = EarthModel::sphere;
  const Run a = run_full(g, eta, o);
  o.gravity = GravityModel::wgs84;
  const Run b = run_full(g, eta, o);
  // gamma(45) = 9.80619777 m s-2 (REFERENCES.md §4, Somigliana)
  CHECK(b.u.at(4, 3) / a.u.at(4, 3) == doctest::Approx(9.80619777 / 9.80665).epsilon(1e-9));
  o.gravity = GravityModel::constant;
  o.gravity_value = 9.0;
  const Run c = run_full(g, eta, o);
  CHECK(c.u.at(4, 3) / a.u.at(4, 3) == doctest::Approx(9.0 / 9.80665).epsilon(1e-12));
}

TEST_CASE("Equatorial beta-plane ridge: u(0) = 2gA/(beta L^2) = 0.95199 m/s") {
  // eta = A exp(-y^2/L^2), y = R phi: the beta-plane form gives
  // u = (2 g A/(beta L^2)) exp(-y^2/L^2) exactly (REFERENCES.md §2, computed:
  // A = 0.1 m, L = 300 km, beta = 2.28916e-11 -> u(0) = 0.95199 m/s).
  const double A = 0.1, L = 300e3, R = earth::mean_radius;
  for (int order : {2, 4, 6}) {
    for (double h : {0.1, 0.05}) {
      Grid g(axis(-8, 8, h), axis(200, 201, h));
      Field eta(g.ny(), g.nx());
      for (std::size_t j = 0; j < g.ny(); ++j)
        for (std::size_t i = 0; i < g.nx(); ++i) {
          const double y = R * g.lat_rad()[j];
          eta.at(j, i) = A * std::exp(-y * y / (L * L));
        }
      CurrentsOptions o;
      o.earth = EarthModel::sphere;
      o.order = order;
      o.equator = EquatorMethod::beta;
      const Run r = run_full(g, eta, o);
      const std::size_t j0 = (g.ny() - 1) / 2;
      REQUIRE(g.lat_deg()[j0] == doctest::Approx(0.0).epsilon(1e-9));
      CAPTURE(order);
      CAPTURE(h);
      // 2nd-order second difference at h = 0.1 deg (11 km) on L = 300 km:
      // relative error ~ (h/L)^2 / 2 < 1e-3.
      CHECK(r.u.at(j0, 5) == doctest::Approx(0.95199).epsilon(1e-3));
      CHECK(std::fabs(r.v.at(j0, 5)) < 1e-9);
      CHECK(r.flags[j0 * g.nx() + 5] == quality::beta_plane);
    }
  }
}

TEST_CASE("Equator: mask band is fill, blend has no spike") {
  const double A = 0.1, L = 300e3, R = earth::mean_radius;
  Grid g(axis(-10, 10, 0.1), axis(200, 201, 0.1));
  Field eta(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) {
      const double y = R * g.lat_rad()[j];
      eta.at(j, i) = A * std::exp(-y * y / (L * L));
    }
  CurrentsOptions o;
  o.earth = EarthModel::sphere;
  o.equator = EquatorMethod::mask;
  const Run m = run_full(g, eta, o);
  for (std::size_t j = 0; j < g.ny(); ++j) {
    const bool in = std::fabs(g.lat_deg()[j]) < 5.0;
    CAPTURE(g.lat_deg()[j]);
    CHECK(std::isnan(m.u.at(j, 5)) == in);
    if (in) CHECK(m.flags[j * g.nx() + 5] == quality::masked_equator);
  }
  o.equator = EquatorMethod::blend;
  const Run b = run_full(g, eta, o);
  // Both parts in closed form for eta = A exp(-y^2/L^2), y = R phi:
  //   f-plane  u_f = -(g/(f R)) eta_phi = 2 g A y e / (f L^2)
  //   beta     u_b = -(g/beta) eta_yy = (2 g A/(beta L^2)) e (1 - 2 y^2/L^2)
  // (the beta-plane form is exact only on the equator), blended with
  // W = exp(-(phi/2.2 deg)^2) (Lagerloef et al. 1999). The blend must follow
  // that curve with no spike where f -> 0.
  double worst = 0, worst_jump = 0;
  for (std::size_t j = 3; j + 3 < g.ny(); ++j) {
    const double lat = g.lat_deg()[j], y = R * g.lat_rad()[j];
    const double e = std::exp(-y * y / (L * L)), gr = earth::standard_gravity;
    const double ub = 2 * gr * A / (beta(EarthModel::sphere, lat) * L * L) * e * (1 - 2 * y * y / (L * L));
    const double f = coriolis(lat);
    const double w = std::exp(-(lat / 2.2) * (lat / 2.2));
    const double uf = f != 0.0 ? 2 * gr * A * y * e / (f * L * L) : 0.0;
    const double expected = std::fabs(lat) < 5.0 ? w * ub + (1 - w) * uf : uf;
    REQUIRE(std::isfinite(b.u.at(j, 5)));
    worst = std::max(worst, std::fabs(b.u.at(j, 5) - expected) / 0.95199);
    worst_jump = std::max(worst_jump, std::fabs(b.u.at(j + 1, 5) - b.u.at(j, 5)));
  }
  // 3-point stencils at 0.1 deg on L = 300 km: relative error ~ (h/L)^2 ~ 1e-3.
  CHECK(worst < 2e-3);
  // Neighbouring rows differ by less than 5 % of the peak: no spike (the
  // steepest slope of the blended curve is ~0.15 m/s per 0.5 deg).
  CHECK(worst_jump < 0.05 * 0.95199);
}

TEST_CASE("Coast: one-sided fallback is flagged, mask removes the cell") {
  Grid g(axis(30, 32, 0.25), axis(0, 3, 0.25));
  Field eta(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i)
      eta.at(j, i) = 0.01 * static_cast<double>(i) + 0.02 * static_cast<double>(j);
  for (std::size_t j = 0; j < g.ny(); ++j) eta.at(j, 6) = NAN;  // a north-south land strip
  CurrentsOptions o;
  o.order = 4;
  const Run r = run_full(g, eta, o);
  const std::size_t nx = g.nx();
  CHECK(r.flags[4 * nx + 6] == quality::missing_height);
  CHECK(std::isnan(r.u.at(4, 6)));
  CHECK(r.flags[4 * nx + 5] == quality::one_sided);
  CHECK(r.flags[4 * nx + 7] == quality::one_sided);
  CHECK(r.flags[4 * nx + 4] == quality::one_sided);  // 5-point stencil reaches the strip
  CHECK(r.flags[4 * nx + 2] == 0);
  // the fallback never uses the missing cell: a linear field stays exact
  const double vexact = r.v.at(4, 2);
  CHECK(r.v.at(4, 5) == doctest::Approx(vexact).epsilon(1e-12));
  CHECK(r.v.at(4, 7) == doctest::Approx(vexact).epsilon(1e-12));
  // domain edges are treated like a coast
  CHECK(r.flags[0 * nx + 2] == quality::one_sided);
  CHECK(r.u.at(0, 2) == doctest::Approx(r.u.at(4, 2)).epsilon(1e-2));
  o.coast = CoastMethod::mask;
  const Run m = run_full(g, eta, o);
  CHECK(m.flags[4 * nx + 5] == quality::masked_coast);
  CHECK(std::isnan(m.u.at(4, 5)));
  CHECK(m.flags[4 * nx + 2] == 0);
}

TEST_CASE("Poles are masked") {
  Grid g(axis(80, 90, 1), axis(0, 5, 1));
  Field eta(g.ny(), g.nx(), 0.1);
  CurrentsOptions o;
  const Run r = run_full(g, eta, o);
  CHECK(r.flags[(g.ny() - 1) * g.nx() + 2] == quality::masked_pole);
  CHECK(std::isnan(r.u.at(g.ny() - 1, 2)));
}

TEST_CASE("Band computation equals the whole-grid computation bit for bit") {
  analytic::Eddy e;
  Grid g(axis(30, 40, 0.1), axis(10, 20, 0.1));
  Field eta(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) eta.at(j, i) = e.eta(g.lat_rad()[j], g.lon_rad()[i]);
  CurrentsOptions o;
  o.order = 6;
  GeostrophicKernel k(g, o);
  const Run full = run_full(g, eta, o);
  const std::size_t h = k.halo_rows(), j0 = 37, n = 11;
  Field band(j0 + n + h - (j0 - h), g.nx());
  for (std::size_t j = j0 - h; j < j0 + n + h; ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) band.at(j - (j0 - h), i) = eta.at(j, i);
  Run part;
  k.compute(band, j0 - h, j0, n, part.u, part.v, part.flags);
  for (std::size_t j = 0; j < n; ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) {
      CHECK(part.u.at(j, i) == full.u.at(j0 + j, i));
      CHECK(part.v.at(j, i) == full.v.at(j0 + j, i));
    }
  Field too_small(3, g.nx());
  CHECK_THROWS_AS(k.compute(too_small, j0, j0, n, part.u, part.v, part.flags), std::logic_error);
}

TEST_CASE("Option validation") {
  CurrentsOptions o;
  o.order = 3;
  CHECK_THROWS_AS(validate(o), UsageError);
  o.order = 2;
  o.equator_band_deg = -1;
  CHECK_THROWS_AS(validate(o), UsageError);
  o.equator_band_deg = 5;
  o.gravity = GravityModel::constant;
  o.gravity_value = 0;
  CHECK_THROWS_AS(validate(o), UsageError);
}
