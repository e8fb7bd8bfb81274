// teos10.cpp — TEOS-10 equation of state (see seatilt/teos10.hpp).
//
// Notation: SA Absolute Salinity (g/kg), CT Conservative Temperature (degC),
// pt potential temperature (degC, p_ref = 0), SP Practical Salinity (PSS-78),
// p sea pressure (dbar), z height (m, positive up). Reduced variables of [2]:
// x = sqrt(sfac SA + offset), y = CT/40, zp = p/1e4. Reference numbers [n]
// are those of the header.
#include "seatilt/teos10.hpp"

#include <cmath>
#include <limits>

namespace seatilt::teos10 {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();
constexpr double pi = 3.14159265358979323846;
constexpr double sfac = 0.0248826675584615;        // 1/(40 uPS) (g/kg)-1 [3]
constexpr double offset = 5.971840214030754e-1;    // 24 sfac (deltaS = 24 g/kg) [3]

// The 75 coefficients v_ijk of [2] (m3 kg-1), as v[k][i][j]: k the power of
// zp (pressure), i the power of y (CT), j the power of x (salinity). Only
// i + j <= max_degree[k] is populated; the rest is zero and never read.
// Values: [3] gsw_internal_const.h, names v000..v006 (vIJK = v[K][I][J]).
constexpr int max_degree[7] = {6, 5, 4, 2, 1, 0, 0};
constexpr double v[7][7][7] = {
    // k = 0
    {{1.0769995862e-3, -3.1038981976e-4, 6.6928067038e-4, -8.5047933937e-4, 5.8086069943e-4,
      -2.1092370507e-4, 3.1932457305e-5},
     {-1.5649734675e-5, 3.5009599764e-5, -4.3592678561e-5, 3.4532461828e-5, -1.1959409788e-5,
      1.3864594581e-6},
     {2.7762106484e-5, -3.7435842344e-5, 3.5907822760e-5, -1.8698584187e-5, 3.8595339244e-6},
     {-1.6521159259e-5, 2.4141479483e-5, -1.4353633048e-5, 2.2863324556e-6},
     {6.9111322702e-6, -8.7595873154e-6, 4.3703680598e-6},
     {-8.0539615540e-7, -3.3052758900e-7},
     {2.0543094268e-7}},
    // k = 1
    {{-6.0799143809e-5, 2.4262468747e-5, -3.4792460974e-5, 3.7470777305e-5, -1.7322218612e-5,
      3.0927427253e-6},
     {1.8505765429e-5, -9.5677088156e-6, 1.1100834765e-5, -9.8447117844e-6, 2.5909225260e-6},
     {-1.1716606853e-5, -2.3678308361e-7, 2.9283346295e-6, -4.8826139200e-7},
     {7.9279656173e-6, -3.4558773655e-6, 3.1655306078e-7},
     {-3.4102187482e-6, 1.2956717783e-6},
     {5.0736766814e-7}},
    // k = 2
    {{9.9856169219e-6, -5.8484432984e-7, -4.8122251597e-6, 4.9263106998e-6, -1.7811974727e-6},
     {-1.1736386731e-6, -5.5699154557e-6, 5.4620748834e-6, -1.3544185627e-6},
     {2.1305028740e-6, 3.9137387080e-7, -6.5731104067e-7},
     {-4.6132540037e-7, 7.7618888092e-9},
     {-6.3352916514e-8}},
    // k = 3
    {{-1.1309361437e-6, 3.6310188515e-7, 1.6746303780e-8},
     {-3.6527006553e-7, -2.7295696237e-7},
     {2.8695905159e-7}},
    // k = 4
    {{1.0531153080e-7, -1.1147125423e-7}, {3.1454099902e-7}},
    // k = 5
    {{-1.2647261286e-8}},
    // k = 6
    {{1.9613503930e-9}},
};

// Horner in x of row v[k][i][0..n].
inline double horner_x(const double* c, int n, double x) {
  double s = c[n];
  for (int j = n - 1; j >= 0; --j) s = s * x + c[j];
  return s;
}

}  // namespace

double specvol(double sa, double ct, double p) {
  if (!(sa >= 0.0)) return nan;  // sqrt below needs sfac SA + offset > 0; SA < 0 is not seawater
  const double x = std::sqrt(sfac * sa + offset);  // [2] reduced salinity
  const double y = ct * 0.025;                       // [2] CT / 40 degC
  const double zp = p * 1.0e-4;                      // [2] p / 1e4 dbar
  // v = sum_k zp^k sum_i y^i sum_j v[k][i][j] x^j   [2], Horner in each variable
  double total = 0.0;
  for (int k = 6; k >= 0; --k) {
    const int d = max_degree[k];
    double in_y = 0.0;
    for (int i = d; i >= 0; --i) in_y = in_y * y + horner_x(v[k][i], d - i, x);
    total = total * zp + in_y;
  }
  return total;
}

double rho(double sa, double ct, double p) { return 1.0 / specvol(sa, ct, p); }

double specvol_sso_0(double p) {
  // specvol(SSO, 0, p) reduced to a polynomial in zp = p/1e4 ([3] gsw_specvol_sso_0)
  const double zp = p * 1.0e-4;
  return 9.726613854843870e-04 +
         zp * (-4.505913211160929e-05 +
               zp * (7.130728965927127e-06 +
                     zp * (-6.657179479768312e-07 +
                           zp * (-2.994054447232880e-08 + zp * (v[5][0][0] + v[6][0][0] * zp)))));
}

double enthalpy_sso_0(double p) {
  // int_0^p specvol(SSO, 0, p') dp' in J kg-1 ([3] gsw_enthalpy_sso_0): the
  // term-by-term integral of specvol_sso_0 over zp, times 1e4 dbar * 1e4 Pa/dbar.
  constexpr double h006 = -2.10787688100e-9, h007 = 2.80192913290e-10;  // [3]
  const double zp = p * 1.0e-4;
  const double dyn = zp * (9.726613854843870e-4 +
                           zp * (-2.252956605630465e-5 +
                                 zp * (2.376909655387404e-6 +
                                       zp * (-1.664294869986011e-7 +
                                             zp * (-5.988108894465758e-9 +
                                                   zp * (h006 + h007 * zp))))));
  return dyn * db2pa * 1.0e4;
}

double ct_from_pt(double sa, double pt) {
  if (!(sa >= 0.0)) return nan;
  // Potential enthalpy h0(SA, pt) (J kg-1) of [3] gsw_ct_from_pt, grouped by
  // powers of xs = sqrt(sfac SA): h0 = a0(y) + xs^2 (a2(y) + xs (a3(y) + xs (c(xs) + y d(y)))),
  // y = pt/40. CT = h0 / cp0 [1].
  const double x2 = sfac * sa;
  const double xs = std::sqrt(x2);
  const double y = pt * 0.025;
  const double a0 =
      61.01362420681071 +
      y * (168776.46138048015 +
           y * (-2735.2785605119625 +
                y * (2574.2164453821433 +
                     y * (-1536.6644434977543 +
                          y * (545.7340497931629 + y * (-50.91091728474331 - 18.30489878927802 * y))))));
  const double a2 =
      268.5520265845071 +
      y * (-12019.028203559312 +
           y * (3734.858026725145 +
                y * (-2046.7671145057618 +
                     y * (465.28655623826234 + y * (-0.6370820302376359 - 10.650848542359153 * y)))));
  const double a3 =
      937.2099110620707 +
      y * (588.1802812170108 +
           y * (248.39476522971285 + y * (-3.871557904936333 - 2.6268019854268356 * y)));
  const double c =
      -1687.914374187449 +
      xs * (246.9598888781377 + xs * (123.59576582457964 - 48.5891069025409 * xs));
  const double d =
      936.3206544460336 +
      y * (-942.7827304544439 +
           y * (369.4389437509002 + y * (-33.83664947895248 - 9.987880382780322 * y)));
  const double h0 = a0 + x2 * (a2 + xs * (a3 + xs * (c + y * d)));
  return h0 / cp0;
}

double sr_from_sp(double sp) { return ups * sp; }  // SR = uPS SP  [1] section 2.4

namespace {
// Gravity at the sea surface used by [3] (m s-2): 9.780327 (1 + (5.2792e-3 + 2.32e-5 s2) s2).
double gsw_surface_gravity(double lat_deg) {
  const double s = std::sin(lat_deg * (pi / 180.0));
  const double s2 = s * s;
  return 9.780327 * (1.0 + (5.2792e-3 + 2.32e-5 * s2) * s2);
}
}  // namespace

double z_from_p(double p, double lat_deg) {
  // g (z - gamma z^2/2) + h_SSO0(p) = 0 solved as the root near zero of
  // a z^2 + b z + c = 0 with a = -gamma b / 2, c = h_SSO0(p)   [3] gsw_z_from_p
  const double b = gsw_surface_gravity(lat_deg);
  const double a = -0.5 * gamma_z * b;
  const double c = enthalpy_sso_0(p);
  return -2.0 * c / (b + std::sqrt(b * b - 4.0 * a * c));
}

double p_from_z(double z, double lat_deg) {
  if (!(z <= 5.0)) return nan;  // [3]: no pressure above the sea surface
  const double s = std::sin(lat_deg * (pi / 180.0));
  const double s2 = s * s;
  const double gs = gsw_surface_gravity(lat_deg);
  // First guess, Saunders (1981) [4]: p = -2 z / ((1 - c1) + sqrt((1 - c1)^2 + 8.84e-6 z))
  const double c1 = 5.25e-3 * s2 + 5.92e-3;
  double p = -2.0 * z / ((1.0 - c1) + std::sqrt((1.0 - c1) * (1.0 - c1) + 8.84e-6 * z));
  // One modified Newton step on f(p) = h_SSO0(p) + g (z - gamma z^2/2), with
  // df/dp = specvol_sso_0 * 1e4 Pa/dbar evaluated at the mid-point   [3]
  const double f = enthalpy_sso_0(p) + gs * (z - 0.5 * gamma_z * (z * z));
  const double p_old = p;
  p = p_old - f / (db2pa * specvol_sso_0(p_old));
  const double p_mid = 0.5 * (p + p_old);
  return p_old - f / (db2pa * specvol_sso_0(p_mid));
}

}  // namespace seatilt::teos10
