#include "seatilt/teos10.hpp"

#include <doctest/doctest.h>

#include <cmath>
#include <initializer_list>

using namespace seatilt;

namespace {

// Relative difference, NaN-safe (a NaN never passes).
bool close_rel(double got, double want, double tol) {
  if (want == 0.0) return std::fabs(got) <= tol;
  return std::fabs(got - want) <= tol * std::fabs(want);
}

struct StateCase {
  double sa, ct, p, specvol, rho;
};

// Check values: python3-gsw 3.6.16 (Debian 12 package python3-gsw, GSW-C
// inside), gsw.specvol(SA, CT, p) and gsw.rho(SA, CT, p), printed with 17
// significant digits. The first row is the standard ocean at the surface.
constexpr StateCase state_cases[] = {
    {35.16504, 0.0, 0.0, 0.00097266138548438702, 1028.1070215427524},
    {35.0, 10.0, 1000.0, 0.00096966775096813524, 1031.2810743696286},
    {34.5, 2.0, 4000.0, 0.00095652520239307708, 1045.4507602080487},
    {37.0, 25.0, 10.0, 0.00097585296490010234, 1024.7445424345967},
    {5.0, -1.5, 0.0, 0.00099620589808216788, 1003.8085519520978},
    {40.0, 30.0, 500.0, 0.00097339270525704602, 1027.3345943515446},
    {34.7, 1.0, 6000.0, 0.00094855942684116145, 1054.2302060400611},
    {20.0, 15.0, 200.0, 0.00098489135000891042, 1015.3404230740304},
};

}  // namespace

TEST_CASE("specvol and rho match python3-gsw (75-term polynomial, Roquet et al. 2015)") {
  for (const auto& c : state_cases) {
    CAPTURE(c.sa);
    CAPTURE(c.ct);
    CAPTURE(c.p);
    CHECK(close_rel(teos10::specvol(c.sa, c.ct, c.p), c.specvol, 1e-13));
    CHECK(close_rel(teos10::rho(c.sa, c.ct, c.p), c.rho, 1e-13));
  }
}

TEST_CASE("the standard ocean: specvol_sso_0 equals specvol(SSO, 0, p)") {
  // Both are [2]'s polynomial; the reduced form of GSW-C must agree to rounding.
  for (double p : {0.0, 10.0, 500.0, 2000.0, 6000.0, 10000.0}) {
    CAPTURE(p);
    CHECK(close_rel(teos10::specvol_sso_0(p), teos10::specvol(teos10::sso, 0.0, p), 1e-14));
  }
  // dh/dp = v: centred difference of enthalpy_sso_0 over 1 dbar (= 1e4 Pa).
  for (double p : {100.0, 3000.0}) {
    const double dh = (teos10::enthalpy_sso_0(p + 0.5) - teos10::enthalpy_sso_0(p - 0.5)) / 1.0e4;
    CHECK(close_rel(dh, teos10::specvol_sso_0(p), 1e-9));
  }
}

TEST_CASE("ct_from_pt matches python3-gsw") {
  struct Case {
    double sa, pt, ct;
  };
  // gsw.CT_from_pt(SA, pt), python3-gsw 3.6.16.
  constexpr Case cases[] = {
      {35.0, 10.0, 9.9928547548390725},     {34.5, -1.5, -1.496614143898531},
      {37.0, 28.0, 27.930477378684529},     {0.0, 5.0, 5.2907565710962823},
      {20.0, 0.0, 0.040034131887903245},    {35.16504, 25.0, 25.000009327153968},
  };
  for (const auto& c : cases) {
    CAPTURE(c.sa);
    CAPTURE(c.pt);
    CHECK(close_rel(teos10::ct_from_pt(c.sa, c.pt), c.ct, 1e-13));
  }
}

TEST_CASE("sr_from_sp is uPS * SP") {
  // gsw.SR_from_SP(35) = 35.165039999999998, gsw.SR_from_SP(34.2) = 34.361267657142861.
  CHECK(close_rel(teos10::sr_from_sp(35.0), 35.165039999999998, 1e-15));
  CHECK(close_rel(teos10::sr_from_sp(34.2), 34.361267657142861, 1e-15));
}

TEST_CASE("z_from_p and p_from_z match python3-gsw") {
  struct Case {
    double p, lat, z, p_of_minus_p;  // z_from_p(p, lat), p_from_z(-p, lat)
  };
  // gsw.z_from_p(p, lat) and gsw.p_from_z(-p, lat), python3-gsw 3.6.16.
  constexpr Case cases[] = {
      {100.0, 0.0, -99.426675809556656, 100.57677078026431},
      {1000.0, 45.0, -989.50005895802144, 1010.6369923851662},
      {4000.0, -60.0, -3925.3450357983425, 4076.7810845770732},
      {10.0, 90.0, -9.8923855862284, 10.108787767917089},
      {6000.0, 10.0, -5884.2932574670031, 6119.5741366136726},
  };
  for (const auto& c : cases) {
    CAPTURE(c.p);
    CAPTURE(c.lat);
    CHECK(close_rel(teos10::z_from_p(c.p, c.lat), c.z, 1e-13));
    CHECK(close_rel(teos10::p_from_z(-c.p, c.lat), c.p_of_minus_p, 1e-13));
  }
  CHECK(teos10::z_from_p(0.0, 30.0) == 0.0);
  CHECK(teos10::p_from_z(0.0, 30.0) == 0.0);
  // Round trip: GSW's one Newton step leaves < 1e-6 dbar at 6000 m (the
  // toolbox documents ~1e-10 relative after the step; common practice, no source).
  for (double z : {-10.0, -1000.0, -6000.0})
    CHECK(std::fabs(teos10::z_from_p(teos10::p_from_z(z, 30.0), 30.0) - z) < 1e-6);
}

TEST_CASE("limits: negative salinity and heights above the sea surface give NaN") {
  CHECK(std::isnan(teos10::specvol(-1.0, 10.0, 0.0)));
  CHECK(std::isnan(teos10::rho(std::nan(""), 10.0, 0.0)));
  CHECK(std::isnan(teos10::ct_from_pt(-0.1, 10.0)));
  CHECK(std::isnan(teos10::p_from_z(6.0, 0.0)));
}
