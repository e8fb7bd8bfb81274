// stencil.hpp — private detail header: the stencil ladder shared by kernel.cpp,
// diagnostics.cpp and grid.cpp (not installed, not part of the public API).
//
// Centred first-derivative stencils of half-width 1, 2, 3 (3-, 5-, 7-point) and
// second-derivative stencils from Arbic, Scott, Chelton, Richman & Shriver
// (2012), JGR 117, C03029, doi:10.1029/2011JC007367 (REFERENCES.md §3); the
// one-sided fallbacks (-3, 4, -1)/2h (2nd order) and (-1, 1)/h (1st order).
//
// Notation: val(m) is the function at offset m along a grid line (NaN when
// missing), crd(m) the coordinate there (finite wherever val may be finite).
// Every derivative is (stencil . val) / (stencil . crd), so non-uniform and
// descending axes need no special case ("derivatives by mapping").
#pragma once

#include <cmath>

#include "seatilt/kernel.hpp"

namespace seatilt::detail {

// Centred first-derivative weights for offsets +1..+hw (antisymmetric): row
// hw-1 is the stencil of half-width hw [REFERENCES.md §3].
inline constexpr double c1[3][3] = {
    {1.0 / 2.0, 0.0, 0.0},
    {8.0 / 12.0, -1.0 / 12.0, 0.0},
    {45.0 / 60.0, -9.0 / 60.0, 1.0 / 60.0},
};
// Centred second-derivative weights: centre, then offsets +-1..+-hw.
inline constexpr double c2[3][4] = {
    {-2.0, 1.0, 0.0, 0.0},
    {-30.0 / 12.0, 16.0 / 12.0, -1.0 / 12.0, 0.0},
    {-490.0 / 180.0, 270.0 / 180.0, -27.0 / 180.0, 2.0 / 180.0},
};

// First derivative along a line by the stencil ladder: the centred stencil of
// half-width HW, then narrower centred ones, then one-sided 3-point, then
// 2-point (the last three only with FALLBACK). Status full only for HW.
template <class Val, class Crd>
Derivative ladder_d1(const Val& val, const Crd& crd, int hw, bool fallback) {
  Derivative d;
  for (int h = hw; h >= 1; --h) {
    bool ok = true;
    for (int m = 1; m <= h && ok; ++m) ok = !std::isnan(val(m)) && !std::isnan(val(-m));
    if (ok) {
      double num = 0.0, den = 0.0;
      for (int m = h; m >= 1; --m) {
        num += c1[h - 1][m - 1] * (val(m) - val(-m));
        den += c1[h - 1][m - 1] * (crd(m) - crd(-m));
      }
      d.value = num / den;
      d.status = h == hw ? Derivative::full : Derivative::shortened;
      return d;
    }
    if (!fallback) return d;
  }
  const double v0 = val(0);
  if (std::isnan(v0)) return d;
  // One-sided, second order: (-3 f0 + 4 f1 - f2) / 2h, and its mirror.
  for (int s : {1, -1}) {
    const double v1 = val(s), v2 = val(2 * s);
    if (!std::isnan(v1) && !std::isnan(v2)) {
      d.value = (-3.0 * v0 + 4.0 * v1 - v2) / (-3.0 * crd(0) + 4.0 * crd(s) - crd(2 * s));
      d.status = Derivative::shortened;
      return d;
    }
  }
  // One-sided, first order: (f1 - f0) / h.
  for (int s : {1, -1}) {
    const double v1 = val(s);
    if (!std::isnan(v1)) {
      d.value = (v1 - v0) / (crd(s) - crd(0));
      d.status = Derivative::shortened;
      return d;
    }
  }
  return d;
}

// Second derivative along a line with centred stencils (shortened with
// fallback). Non-uniform axis: f_xx = (f_jj - f_x x_jj) / x_j^2, each index
// derivative taken with the stencil of the same half-width.
template <class Val, class Crd>
Derivative ladder_d2(const Val& val, const Crd& crd, int hw, bool fallback) {
  Derivative d;
  const double v0 = val(0);
  if (std::isnan(v0)) return d;
  for (int h = hw; h >= 1; --h) {
    bool ok = true;
    for (int m = 1; m <= h && ok; ++m) ok = !std::isnan(val(m)) && !std::isnan(val(-m));
    if (ok) {
      double fj = 0.0, xj = 0.0, fjj = c2[h - 1][0] * v0, xjj = c2[h - 1][0] * crd(0);
      for (int m = h; m >= 1; --m) {
        fj += c1[h - 1][m - 1] * (val(m) - val(-m));
        xj += c1[h - 1][m - 1] * (crd(m) - crd(-m));
        fjj += c2[h - 1][m] * (val(m) + val(-m));
        xjj += c2[h - 1][m] * (crd(m) + crd(-m));
      }
      d.value = (fjj - (fj / xj) * xjj) / (xj * xj);
      d.status = h == hw ? Derivative::full : Derivative::shortened;
      return d;
    }
    if (!fallback) return d;
  }
  return d;
}

}  // namespace seatilt::detail
