// Analytic test fields shared by the unit tests (not part of the library).
//
// Gaussian eddy on the sphere in (phi, lambda), radians:
//   eta = A exp(-q),  q = ((phi - p0)^2 + c0^2 (lam - l0)^2) / ell^2,  c0 = cos p0
// with every derivative in closed form, and the exact geostrophic velocity on
// a sphere of radius R with constant g:
//   u = -(g / (f R)) eta_phi,  v = (g / (f R cos phi)) eta_lam,  f = 2 Omega sin phi.
#pragma once

#include <cmath>

#include "seatilt/grid.hpp"

namespace analytic {

struct Eddy {
  double A = 0.2, p0 = 0.6, l0 = 0.3, ell = 0.015;
  double R = seatilt::earth::mean_radius, g = seatilt::earth::standard_gravity;
  double Om = seatilt::earth::omega;

  double c0() const { return std::cos(p0); }
  double eta(double p, double l) const {
    const double a = p - p0, b = l - l0, c = c0();
    return A * std::exp(-(a * a + c * c * b * b) / (ell * ell));
  }
  double ep(double p, double l) const { return -2 * (p - p0) / (ell * ell) * eta(p, l); }
  double el(double p, double l) const { const double c = c0(); return -2 * c * c * (l - l0) / (ell * ell) * eta(p, l); }
  double epp(double p, double l) const {
    const double a = 2 * (p - p0) / (ell * ell);
    return (a * a - 2 / (ell * ell)) * eta(p, l);
  }
  double ell2(double p, double l) const {
    const double c = c0(), b = 2 * c * c * (l - l0) / (ell * ell);
    return (b * b - 2 * c * c / (ell * ell)) * eta(p, l);
  }
  double epl(double p, double l) const {
    const double c = c0();
    return (2 * (p - p0) / (ell * ell)) * (2 * c * c * (l - l0) / (ell * ell)) * eta(p, l);
  }
  double f(double p) const { return 2 * Om * std::sin(p); }
  double fp(double p) const { return 2 * Om * std::cos(p); }
  double u(double p, double l) const { return -g / (f(p) * R) * ep(p, l); }
  double v(double p, double l) const { return g / (f(p) * R * std::cos(p)) * el(p, l); }
  // derivatives of u, v
  double u_p(double p, double l) const {
    return -g / R * (epp(p, l) / f(p) - ep(p, l) * fp(p) / (f(p) * f(p)));
  }
  double u_l(double p, double l) const { return -g / (f(p) * R) * epl(p, l); }
  double v_l(double p, double l) const { return g / (f(p) * R * std::cos(p)) * ell2(p, l); }
  double v_p(double p, double l) const {
    // d/dphi [1/(f cos phi)] = -(f' cos phi - f sin phi) / (f cos phi)^2
    const double fc = f(p) * std::cos(p);
    const double d = -(fp(p) * std::cos(p) - f(p) * std::sin(p)) / (fc * fc);
    return g / R * (d * el(p, l) + epl(p, l) / fc);
  }
  // kinematics on the sphere (REFERENCES.md §6)
  double zeta(double p, double l) const {
    return v_l(p, l) / (R * std::cos(p)) - u_p(p, l) / R + u(p, l) * std::tan(p) / R;
  }
  double sn(double p, double l) const {
    return u_l(p, l) / (R * std::cos(p)) - v_p(p, l) / R - v(p, l) * std::tan(p) / R;
  }
  double ss(double p, double l) const {
    return v_l(p, l) / (R * std::cos(p)) + u_p(p, l) / R + u(p, l) * std::tan(p) / R;
  }
  double ow(double p, double l) const {
    const double a = sn(p, l), b = ss(p, l), z = zeta(p, l);
    return a * a + b * b - z * z;
  }
};

}  // namespace analytic
