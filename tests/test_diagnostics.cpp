#include "seatilt/diagnostics.hpp"

#include <doctest/doctest.h>

#include <algorithm>
#include <cmath>
#include <vector>

#include "analytic.hpp"

using namespace seatilt;

namespace {
constexpr double pi = 3.14159265358979323846;
constexpr double deg = pi / 180;

std::vector<double> axis(double lo, double hi, double step) {
  std::vector<double> a;
  for (double x = lo; x <= hi + 1e-9; x += step) a.push_back(x);
  return a;
}

template <class U, class V>
Kinematics kin_of(const Grid& g, U uf, V vf, int order, std::vector<std::uint8_t>& flags) {
  Field u(g.ny(), g.nx()), v(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) {
      u.at(j, i) = uf(g.lat_rad()[j], g.lon_rad()[i]);
      v.at(j, i) = vf(g.lat_rad()[j], g.lon_rad()[i]);
    }
  KinematicsKernel k(g, order, CoastMethod::one_sided, EarthModel::sphere);
  Kinematics out;
  flags.assign(g.ny() * g.nx(), 0);
  k.compute(u, v, 0, 0, g.ny(), out, flags);
  return out;
}
}  // namespace

TEST_CASE("Solid-body rotation about the polar axis: zeta = 2U sin(phi)/R, no strain") {
  // u = U cos(phi), v = 0 (REFERENCES.md §6): zeta = 2 U sin(phi) / R; without
  // the u tan(phi)/R metric term zeta would be half of that.
  const double U = 0.5, R = earth::mean_radius;
  Grid g(axis(-60, 60, 0.5), axis(0, 10, 0.5));
  std::vector<std::uint8_t> fl;
  const Kinematics k = kin_of(
      g, [&](double p, double) { return U * std::cos(p); }, [](double, double) { return 0.0; }, 4,
      fl);
  for (std::size_t j = 2; j + 2 < g.ny(); j += 7) {
    const double p = g.lat_rad()[j];
    CAPTURE(g.lat_deg()[j]);
    CHECK(k.vorticity.at(j, 5) == doctest::Approx(2 * U * std::sin(p) / R).epsilon(1e-7).scale(1e-12));
    CHECK(std::fabs(k.strain.at(j, 5)) < 1e-15);
    CHECK(k.speed.at(j, 5) == doctest::Approx(U * std::cos(p)));
  }
}

TEST_CASE("Solid-body rotation about an equatorial axis: no strain, zeta = 2 Ws cos(phi) cos(lambda)") {
  // u = -Ws R sin(phi) cos(lambda), v = Ws R sin(lambda) (REFERENCES.md §6).
  const double Ws = 1e-6, R = earth::mean_radius;
  Grid g(axis(-70, 70, 0.25), axis(-40, 40, 0.25));
  std::vector<std::uint8_t> fl;
  const Kinematics k = kin_of(
      g, [&](double p, double l) { return -Ws * R * std::sin(p) * std::cos(l); },
      [&](double, double l) { return Ws * R * std::sin(l); }, 6, fl);
  double worst_strain = 0, worst_zeta = 0;
  for (std::size_t j = 3; j + 3 < g.ny(); ++j)
    for (std::size_t i = 3; i + 3 < g.nx(); ++i) {
      const double p = g.lat_rad()[j], l = g.lon_rad()[i];
      worst_strain = std::max(worst_strain, k.strain.at(j, i));
      worst_zeta = std::max(worst_zeta, std::fabs(k.vorticity.at(j, i) - 2 * Ws * std::cos(p) * std::cos(l)));
      CHECK(k.okubo_weiss.at(j, i) < 0);
    }
  // 7-point stencil on a 0.25 deg grid: truncation ~ (h)^6 / 140, ~1e-14 relative.
  CHECK(worst_strain < 1e-12 * Ws);
  CHECK(worst_zeta < 1e-12 * Ws);
}

TEST_CASE("Gaussian eddy: vorticity, strain and Okubo-Weiss against exact derivatives") {
  for (double lat : {35.0, -35.0}) {
    analytic::Eddy e;
    e.p0 = lat * deg;
    CAPTURE(lat);
    auto err = [&](double h, int order) {
      const double half = 3 * e.ell / deg;
      Grid g(axis(lat - half, lat + half, h),
             axis(e.l0 / deg - half / e.c0(), e.l0 / deg + half / e.c0(), h));
      std::vector<std::uint8_t> fl;
      const Kinematics k = kin_of(
          g, [&](double p, double l) { return e.u(p, l); },
          [&](double p, double l) { return e.v(p, l); }, order, fl);
      double ez = 0, ew = 0;
      for (std::size_t j = 0; j < g.ny(); ++j)
        for (std::size_t i = 0; i < g.nx(); ++i) {
          const double p = g.lat_rad()[j], l = g.lon_rad()[i];
          const double a = p - e.p0, b = (l - e.l0) * e.c0();
          if (a * a + b * b > e.ell * e.ell) continue;
          REQUIRE(fl[j * g.nx() + i] == 0);
          ez = std::max(ez, std::fabs(k.vorticity.at(j, i) - e.zeta(p, l)));
          ew = std::max(ew, std::fabs(k.okubo_weiss.at(j, i) - e.ow(p, l)));
        }
      return std::pair<double, double>(ez, ew);
    };
    const auto a2 = err(0.1, 2), b2 = err(0.05, 2);
    CHECK(a2.first / b2.first == doctest::Approx(4.0).epsilon(0.1));
    CHECK(a2.second / b2.second == doctest::Approx(4.0).epsilon(0.15));
    const auto a4 = err(0.1, 4), b4 = err(0.05, 4);
    CHECK(a4.first / b4.first == doctest::Approx(16.0).epsilon(0.15));
  }
}

TEST_CASE("Gaussian eddy centre: zeta0 = -4gA/(fL^2), W0 = -zeta0^2 (REFERENCES.md §5)") {
  // A = 0.2 m, L = 100 km, phi = 35 deg: zeta0 = -9.37855e-6 s-1,
  // W0 = -8.79573e-11 s-2 (computed, f-plane); on the sphere the centre values
  // are the same (eta_phi = eta_lambda = 0 there removes the beta and metric terms).
  analytic::Eddy e;
  e.A = 0.2;
  e.p0 = 35 * deg;
  e.ell = 100e3 / e.R;
  const double h = 0.01;
  const double c = e.p0 / deg, half = 0.1;
  Grid g(axis(c - half, c + half, h), axis(e.l0 / deg - half, e.l0 / deg + half, h));
  std::vector<std::uint8_t> fl;
  const Kinematics k = kin_of(
      g, [&](double p, double l) { return e.u(p, l); }, [&](double p, double l) { return e.v(p, l); },
      2, fl);
  // find the node at the centre
  std::size_t jc = 0, ic = 0;
  for (std::size_t j = 0; j < g.ny(); ++j)
    if (std::fabs(g.lat_rad()[j] - e.p0) < std::fabs(g.lat_rad()[jc] - e.p0)) jc = j;
  for (std::size_t i = 0; i < g.nx(); ++i)
    if (std::fabs(g.lon_rad()[i] - e.l0) < std::fabs(g.lon_rad()[ic] - e.l0)) ic = i;
  REQUIRE(std::fabs(g.lat_rad()[jc] - e.p0) < 1e-9);
  REQUIRE(std::fabs(g.lon_rad()[ic] - e.l0) < 1e-9);
  CHECK(k.vorticity.at(jc, ic) == doctest::Approx(-9.37855e-6).epsilon(1e-4));
  CHECK(k.okubo_weiss.at(jc, ic) == doctest::Approx(-8.79573e-11).epsilon(2e-4));
}

TEST_CASE("Masked velocities stay masked; neighbours fall back and are flagged") {
  Grid g(axis(20, 22, 0.25), axis(0, 3, 0.25));
  std::vector<std::uint8_t> fl;
  Field u(g.ny(), g.nx(), 0.1), v(g.ny(), g.nx(), 0.0);
  u.at(4, 6) = NAN;
  v.at(4, 6) = NAN;
  KinematicsKernel k(g, 2, CoastMethod::one_sided, EarthModel::wgs84);
  Kinematics out;
  fl.assign(g.ny() * g.nx(), 0);
  k.compute(u, v, 0, 0, g.ny(), out, fl);
  CHECK(std::isnan(out.vorticity.at(4, 6)));
  CHECK(std::isnan(out.speed.at(4, 6)));
  CHECK(std::isfinite(out.vorticity.at(4, 5)));
  CHECK(fl[4 * g.nx() + 5] == quality::one_sided);
  CHECK(fl[4 * g.nx() + 2] == 0);
}

TEST_CASE("vorticity() alone equals compute()'s vorticity bit for bit (coast, seam, edges, bands)") {
  // A global periodic grid (seam) with an island and a masked strip, an
  // eddy-like smooth field; u and v missing together, as the kernel makes them.
  Grid g(axis(-60, 60, 1.0), axis(0, 359, 1.0));
  Field u(g.ny(), g.nx()), v(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) {
      const double phi = g.lat_rad()[j], lam = g.lon_rad()[i];
      u.at(j, i) = 0.3 * std::cos(phi) * std::sin(3 * lam) + 0.1 * std::sin(2 * phi);
      v.at(j, i) = 0.2 * std::cos(2 * lam + phi);
      const bool land = (j > 50 && j < 60 && i > 100 && i < 115) || i == 200 || (j == 7 && i == 0);
      if (land) u.at(j, i) = v.at(j, i) = NAN;
    }
  for (int order : {2, 4, 6})
    for (CoastMethod coast : {CoastMethod::one_sided, CoastMethod::mask}) {
      KinematicsKernel k(g, order, coast, EarthModel::wgs84);
      // Rows 30..69 from a band holding rows 30-h .. 70+h (as the bands of a run).
      const std::size_t h = k.halo_rows(), j0 = 30, n = 40;
      const std::size_t b0 = j0 - h, rows = n + 2 * h;
      Field ub(rows, g.nx()), vb(rows, g.nx());
      std::copy(u.row(b0), u.row(b0) + rows * g.nx(), ub.data.begin());
      std::copy(v.row(b0), v.row(b0) + rows * g.nx(), vb.data.begin());
      Kinematics all;
      std::vector<std::uint8_t> fl(n * g.nx(), 0);
      k.compute(ub, vb, b0, j0, n, all, fl);
      Field zeta;
      k.vorticity(ub, vb, b0, j0, n, zeta);
      REQUIRE(zeta.data.size() == all.vorticity.data.size());
      std::size_t differ = 0;
      for (std::size_t c = 0; c < zeta.data.size(); ++c) {
        const double a = zeta.data[c], b = all.vorticity.data[c];
        differ += !((std::isnan(a) && std::isnan(b)) || a == b);
      }
      CHECK(differ == 0);
      // Whole grid in one band too (edges of the grid).
      Kinematics whole;
      std::vector<std::uint8_t> fw(g.ny() * g.nx(), 0);
      k.compute(u, v, 0, 0, g.ny(), whole, fw);
      k.vorticity(u, v, 0, 0, g.ny(), zeta);
      differ = 0;
      for (std::size_t c = 0; c < zeta.data.size(); ++c) {
        const double a = zeta.data[c], b = whole.vorticity.data[c];
        differ += !((std::isnan(a) && std::isnan(b)) || a == b);
      }
      CHECK(differ == 0);
    }
}
