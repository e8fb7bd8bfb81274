#include "seatilt/thermal.hpp"

#include <doctest/doctest.h>

#include <cmath>
#include <initializer_list>
#include <vector>

#include "seatilt/error.hpp"
#include "seatilt/teos10.hpp"

using namespace seatilt;

namespace {

constexpr double pi = 3.14159265358979323846;
constexpr double deg = pi / 180.0;

std::vector<double> axis(double lo, double hi, double step) {
  std::vector<double> a;
  for (double x = lo; x <= hi + 1e-9; x += step) a.push_back(x);
  return a;
}

bool close_rel(double got, double want, double tol) {
  return std::fabs(got - want) <= tol * std::max(std::fabs(want), 1e-300);
}

struct Shear {
  Field du, dv;
  std::vector<std::uint8_t> flags;
};

Shear shear_of(const Grid& g, const Field& rho, const ThermalOptions& o) {
  ShearKernel k(g, o);
  Shear s;
  k.compute(rho, 0, 0, g.ny(), s.du, s.dv, s.flags);
  return s;
}

}  // namespace

TEST_CASE("shear_integral: trapezoidal rule is exact for shear linear in z") {
  // s(z) = a + b z between the levels, held at s(z0) above the first level:
  // I(zo) = s0 z0 + a (zo - z0) + b (zo^2 - z0^2) / 2 for zo <= z0 (closed form).
  const double a = 2e-4, b = 3e-7;
  const std::vector<double> z = {-10.0, -50.0, -120.0, -300.0, -1000.0};
  std::vector<double> s;
  for (double x : z) s.push_back(a + b * x);
  const double s0 = s[0], z0 = z[0];
  auto exact = [&](double zo) {
    if (zo >= z0) return s0 * zo;
    return s0 * z0 + a * (zo - z0) + 0.5 * b * (zo * zo - z0 * z0);
  };
  for (double zo : {0.0, -5.0, -10.0, -30.0, -50.0, -77.7, -300.0, -640.0, -1000.0}) {
    CAPTURE(zo);
    CHECK(close_rel(shear_integral(z.data(), s.data(), z.size(), zo), exact(zo), 1e-12));
  }
  // Below the deepest usable level, above the surface, or no level: NaN.
  CHECK(std::isnan(shear_integral(z.data(), s.data(), z.size(), -1000.5)));
  CHECK(std::isnan(shear_integral(z.data(), s.data(), 3, -300.0)));
  CHECK(std::isnan(shear_integral(z.data(), s.data(), z.size(), 1.0)));
  CHECK(std::isnan(shear_integral(z.data(), s.data(), 0, -10.0)));
  // Zero shear: no change with depth (Taylor-Proudman limit).
  const std::vector<double> zero(z.size(), 0.0);
  for (double zo : {0.0, -42.0, -1000.0}) CHECK(shear_integral(z.data(), zero.data(), z.size(), zo) == 0.0);
}

TEST_CASE("ShearKernel: density linear in latitude and longitude gives the exact shear") {
  // rho = c + A phi + B lambda (kg m-3, radians). Centred and one-sided
  // differences are exact for linear functions, so on the sphere of radius R:
  //   du/dz =  g A / (rho0 f R),  dv/dz = -g B / (rho0 f R cos phi)  (thermal wind, z up)
  const double A = 50.0, B = -20.0, c = 3.0;  // 50 kg m-3 per radian ~ 0.87 kg m-3 per degree
  for (int order : {2, 4, 6}) {
    CAPTURE(order);
    Grid g(axis(20.0, 40.0, 1.0), axis(-40.0, -20.0, 0.5));
    Field rho(g.ny(), g.nx());
    for (std::size_t j = 0; j < g.ny(); ++j)
      for (std::size_t i = 0; i < g.nx(); ++i)
        rho.at(j, i) = c + A * g.lat_rad()[j] + B * g.lon_rad()[i];
    ThermalOptions o;
    o.order = order;
    o.earth = EarthModel::sphere;
    const Shear s = shear_of(g, rho, o);
    const double R = earth::mean_radius, g0 = earth::standard_gravity;
    for (std::size_t j = 0; j < g.ny(); ++j)
      for (std::size_t i = 0; i < g.nx(); ++i) {
        const double phi = g.lat_rad()[j];
        const double f = 2.0 * earth::omega * std::sin(phi);
        CHECK(close_rel(s.du.at(j, i), g0 * A / (o.rho0 * f * R), 1e-10));
        CHECK(close_rel(s.dv.at(j, i), -g0 * B / (o.rho0 * f * R * std::cos(phi)), 1e-10));
        const bool edge = j < 1 || i < 1 || j + 1 >= g.ny() || i + 1 >= g.nx();
        if (!edge && order == 2) CHECK(s.flags[j * g.nx() + i] == 0);
        if (edge) CHECK(s.flags[j * g.nx() + i] == profile_quality::one_sided);
      }
  }
}

TEST_CASE("ShearKernel: signs and hemispheres (WGS84 radii)") {
  // Denser water poleward, northern hemisphere: eastward flow increases upward
  // (du/dz > 0). Southern hemisphere, density increasing southward (drho/dy < 0)
  // and f < 0: du/dz = g (drho/dy)/(rho0 f) > 0 too. Density increasing east
  // in the north: dv/dz < 0 (northward flow decreases upward).
  Grid g(axis(-50.0, 50.0, 1.0), axis(0.0, 10.0, 1.0));
  Field north(g.ny(), g.nx()), east(g.ny(), g.nx());
  for (std::size_t j = 0; j < g.ny(); ++j)
    for (std::size_t i = 0; i < g.nx(); ++i) {
      north.at(j, i) = 0.01 * g.lat_deg()[j] * g.lat_deg()[j];  // rises toward both poles
      east.at(j, i) = 0.01 * g.lon_deg()[i];
    }
  ThermalOptions o;  // wgs84, standard gravity, band 5
  const Shear sn = shear_of(g, north, o);
  const Shear se = shear_of(g, east, o);
  for (std::size_t j = 0; j < g.ny(); ++j) {
    const double lat = g.lat_deg()[j];
    const std::size_t i = 5;
    if (std::fabs(lat) < 5.0) {
      CHECK(sn.flags[j * g.nx() + i] == profile_quality::masked_equator);
      CHECK(std::isnan(sn.du.at(j, i)));
      continue;
    }
    CHECK(sn.du.at(j, i) > 0.0);
    if (lat > 0) CHECK(se.dv.at(j, i) < 0.0);
    if (lat < 0) CHECK(se.dv.at(j, i) > 0.0);
    // Magnitude with the WGS84 radii: d(rho)/dy = 0.02 lat_deg / (M deg).
    if (std::fabs(lat) > 6.0 && std::fabs(lat) < 49.0) {
      const double phi = lat * deg;
      const double drho_dy = 0.02 * lat / (meridional_radius(EarthModel::wgs84, phi) * deg);
      CHECK(close_rel(sn.du.at(j, i), earth::standard_gravity * drho_dy / (1025.0 * coriolis(lat)), 1e-10));
    }
  }
}

TEST_CASE("ShearKernel: uniform density gives zero shear; missing, isolated and masked cells") {
  Grid g(axis(30.0, 40.0, 1.0), axis(0.0, 10.0, 1.0));
  Field rho(g.ny(), g.nx(), 1027.5);
  ThermalOptions o;
  Shear s = shear_of(g, rho, o);
  for (std::size_t c = 0; c < rho.data.size(); ++c) {
    CHECK(s.du.data[c] == 0.0);
    CHECK(s.dv.data[c] == 0.0);
  }
  // A missing cell (land), and a cell whose every neighbour is missing.
  for (std::size_t j = 2; j <= 6; ++j)
    for (std::size_t i = 2; i <= 6; ++i) rho.at(j, i) = std::nan("");
  rho.at(4, 4) = 1027.5;
  s = shear_of(g, rho, o);
  CHECK(s.flags[3 * g.nx() + 3] == profile_quality::missing_density);
  CHECK(s.flags[4 * g.nx() + 4] == profile_quality::no_gradient);
  CHECK(std::isnan(s.du.at(4, 4)));
  CHECK(s.flags[1 * g.nx() + 4] == profile_quality::one_sided);  // next to the land
  // --coast mask: the same cell has no usable stencil.
  o.coast = CoastMethod::mask;
  s = shear_of(g, rho, o);
  CHECK(s.flags[1 * g.nx() + 4] == profile_quality::no_gradient);
  // A pole row is masked.
  Grid gp(axis(80.0, 90.0, 1.0), axis(0.0, 10.0, 1.0));
  Field rp(gp.ny(), gp.nx(), 1027.0);
  s = shear_of(gp, rp, ThermalOptions{});
  CHECK(s.flags[10 * gp.nx() + 3] == profile_quality::masked_pole);
}

TEST_CASE("ShearKernel: the halo must be covered") {
  Grid g(axis(30.0, 40.0, 1.0), axis(0.0, 10.0, 1.0));
  ShearKernel k(g, ThermalOptions{});
  REQUIRE(k.halo_rows() == 2);  // order 2: one-sided fallbacks reach two rows
  Field part(5, g.nx(), 1.0), du, dv;  // global rows 3..7
  std::vector<std::uint8_t> f;
  CHECK_THROWS_AS(k.compute(part, 3, 4, 3, du, dv, f), std::logic_error);
  CHECK_NOTHROW(k.compute(part, 3, 5, 1, du, dv, f));
}

TEST_CASE("GridTransfer: identity, bilinear exactness, periodic wrap, outside") {
  Grid a(axis(20.0, 30.0, 1.0), axis(0.0, 10.0, 1.0));
  GridTransfer same(a, a);
  CHECK(same.identity());
  Field lin(a.ny(), a.nx());
  for (std::size_t j = 0; j < a.ny(); ++j)
    for (std::size_t i = 0; i < a.nx(); ++i) lin.at(j, i) = 2.0 * a.lat_deg()[j] - 0.5 * a.lon_deg()[i];
  std::vector<std::uint8_t> fl(lin.data.size(), 0), out_fl;
  Field out;
  // Descending target latitudes between nodes, longitudes beyond the source: NaN there.
  const std::vector<double> up = axis(20.25, 29.5, 0.25);
  const std::vector<double> desc(up.rbegin(), up.rend());  // 29.5 .. 20.25 descending
  Grid bd(desc, axis(0.25, 12.0, 0.25));
  GridTransfer t(a, bd);
  CHECK_FALSE(t.identity());
  t.apply(lin, fl, out, out_fl);
  for (std::size_t j = 0; j < bd.ny(); ++j)
    for (std::size_t i = 0; i < bd.nx(); ++i) {
      const double want = 2.0 * bd.lat_deg()[j] - 0.5 * bd.lon_deg()[i];
      if (bd.lon_deg()[i] > 10.0) CHECK(std::isnan(out.at(j, i)));
      else CHECK(std::fabs(out.at(j, i) - want) < 1e-12);
    }
  // Global periodic source: a target between the last column (359) and 360 wraps.
  Grid glob(axis(-10.0, 10.0, 1.0), axis(0.0, 359.0, 1.0));
  REQUIRE(glob.periodic());
  Field wave(glob.ny(), glob.nx());
  for (std::size_t j = 0; j < glob.ny(); ++j)
    for (std::size_t i = 0; i < glob.nx(); ++i) wave.at(j, i) = static_cast<double>(i % 2);
  Grid tgt({0.0, 1.0}, {359.25, 359.5, 0.0});
  GridTransfer tw(glob, tgt);
  std::vector<std::uint8_t> gf(wave.data.size(), 0);
  tw.apply(wave, gf, out, out_fl);
  CHECK(std::fabs(out.at(0, 0) - 0.75) < 1e-12);  // between 359 (value 1) and 360 = 0 (value 0)
  CHECK(std::fabs(out.at(0, 1) - 0.5) < 1e-12);
  CHECK(out.at(0, 2) == 0.0);
  // Missing corner -> NaN; a node next to a missing cell stays exact.
  lin.at(3, 3) = std::nan("");
  Grid half({22.5, 23.0}, {3.5, 4.0});
  GridTransfer th(a, half);
  th.apply(lin, fl, out, out_fl);
  CHECK(std::isnan(out.at(0, 0)));
  CHECK(std::fabs(out.at(1, 1) - (2.0 * 23.0 - 2.0)) < 1e-12);
}

TEST_CASE("in_situ_density converts practical salinity and potential temperature as TEOS-10") {
  // python3-gsw 3.6.16: gsw.rho(gsw.SR_from_SP(35), gsw.CT_from_pt(SR, 10), 1000)
  CHECK(close_rel(in_situ_density(10.0, 35.0, TemperatureKind::potential, SalinityKind::practical, 1000.0),
                  1031.4095038192761, 1e-13));
  // gsw.rho(34, 3, 2000): SA and CT used as given.
  CHECK(close_rel(in_situ_density(3.0, 34.0, TemperatureKind::conservative, SalinityKind::absolute, 2000.0),
                  1036.1248124706615, 1e-13));
  CHECK(std::isnan(in_situ_density(std::nan(""), 35.0, TemperatureKind::conservative,
                                   SalinityKind::absolute, 0.0)));
}

TEST_CASE("option parsing: reference, levels, fields, validation") {
  CHECK(parse_reference("surface").kind == ThermalReference::surface);
  const ThermalReference r = parse_reference("no-motion:1500");
  CHECK(r.kind == ThermalReference::no_motion);
  CHECK(r.level == 1500.0);
  CHECK_THROWS_AS(parse_reference("no-motion:"), UsageError);
  CHECK_THROWS_AS(parse_reference("no-motion:-5"), UsageError);
  CHECK_THROWS_AS(parse_reference("bottom"), UsageError);
  CHECK(parse_levels("all").empty());
  CHECK(parse_levels("0, 100,500").size() == 3);
  CHECK(parse_levels("1000,10").size() == 2);
  CHECK_THROWS_AS(parse_levels("0,100,50"), UsageError);
  CHECK_THROWS_AS(parse_levels("0,abc"), UsageError);
  CHECK_THROWS_AS(parse_levels("nan"), UsageError);
  CHECK(parse_profile_fields("u,v").empty());
  CHECK(parse_profile_fields("all").size() == 3);
  CHECK(parse_profile_fields("density,du_dz,density") == std::vector<std::string>{"density", "du_dz"});
  CHECK_THROWS_AS(parse_profile_fields("speed"), UsageError);
  ThermalOptions o;
  o.rho0 = 500.0;
  CHECK_THROWS_AS(validate(o), UsageError);
  o = ThermalOptions{};
  o.order = 3;
  CHECK_THROWS_AS(validate(o), UsageError);
}

TEST_CASE("section_profile: normal component, per-depth and full-depth sums by hand") {
  // Two segments of 1000 m walked east (azimuth 90): the left normal is north, v_n = v.
  // Three levels at z = 0, -100, -300; the second segment has no third level (sea floor).
  const double nan = std::nan("");
  const std::vector<double> len = {1000.0, 1000.0}, az = {90.0, 90.0};
  const std::vector<double> u = {5, 5, 5, 5, 5, 5, 5, 5, 5};  // along the walk: no transport
  const std::vector<double> v = {0.3, 0.5, 0.7,   // level 0 at samples 0, 1, 2
                                 0.2, 0.4, 0.6,   // level 1
                                 0.1, 0.1, nan};  // level 2
  const std::vector<double> z = {0.0, 0.0, -100.0, -100.0, -300.0, -300.0};
  const SectionProfile p = section_profile(2, 3, len, az, u, v, z, {}, {});
  // segment means: level 0: 0.4, 0.6; level 1: 0.3, 0.5; level 2: 0.1, unusable
  CHECK(p.normal_velocity[0] == doctest::Approx(0.4).epsilon(1e-14));
  CHECK(std::isnan(p.normal_velocity[5]));
  CHECK(p.transport_per_depth[0] == doctest::Approx(1000.0).epsilon(1e-14));
  CHECK(p.transport_per_depth[2] == doctest::Approx(100.0).epsilon(1e-14));
  // seg 0: 100 (0.4 + 0.3)/2 + 200 (0.3 + 0.1)/2 = 35 + 40; seg 1: 100 (0.6 + 0.5)/2 = 55 -> (75 + 55) 1000
  CHECK(p.transport == doctest::Approx(130000.0).epsilon(1e-14));
  CHECK(p.excluded_fraction == 0.0);
  // Walking west (270) flips the sign; a surface velocity adds the top slab when z0 < 0.
  const SectionProfile w = section_profile(2, 3, len, {270.0, 270.0}, u, v, z, {}, {});
  CHECK(w.transport == doctest::Approx(-130000.0).epsilon(1e-14));
  const std::vector<double> zdeep = {-10.0, -10.0, -100.0, -100.0, -300.0, -300.0};
  const SectionProfile t = section_profile(2, 3, len, az, u, v, zdeep, {0, 0, 0}, {1.0, 1.0, 1.0});
  // extra top slabs: 10 (1 + 0.4)/2 + 10 (1 + 0.6)/2 = 15 per 1000 m; the first layer shrinks by 10 m
  CHECK(t.transport == doctest::Approx(130000.0 + 15000.0 - 10.0 * (0.35 + 0.55) * 1000.0).epsilon(1e-14));
  CHECK_THROWS_AS(section_profile(2, 3, len, az, u, v, z, {1.0}, {}), std::invalid_argument);
}
