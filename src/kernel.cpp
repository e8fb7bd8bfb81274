// Notation: j row (latitude index), i column (longitude index), m stencil
// offset; phi latitude and lambda longitude in radians; eta height (m);
// f Coriolis parameter (s-1); beta = df/dy (m-1 s-1); g gravity (m s-2);
// M, N radii of curvature (m). NaN marks a missing value throughout.
#include "seatilt/kernel.hpp"

#include <cmath>
#include <limits>
#include <stdexcept>
#include <string>

#include "seatilt/error.hpp"

namespace seatilt {

namespace {

constexpr double pi = 3.14159265358979323846;
constexpr double nan = std::numeric_limits<double>::quiet_NaN();

// Centred first-derivative weights for offsets +1..+hw (antisymmetric), from
// [1] (REFERENCES.md §3): row hw-1 is the stencil of half-width hw.
constexpr double c1[3][3] = {
    {1.0 / 2.0, 0.0, 0.0},
    {8.0 / 12.0, -1.0 / 12.0, 0.0},
    {45.0 / 60.0, -9.0 / 60.0, 1.0 / 60.0},
};
// Centred second-derivative weights: centre, then offsets +-1..+-hw.
constexpr double c2[3][4] = {
    {-2.0, 1.0, 0.0, 0.0},
    {-30.0 / 12.0, 16.0 / 12.0, -1.0 / 12.0, 0.0},
    {-490.0 / 180.0, 270.0 / 180.0, -27.0 / 180.0, 2.0 / 180.0},
};

// First derivative along a line by the stencil ladder. val(m) gives the
// function at offset m (NaN when missing), crd(m) the coordinate (finite
// wherever val may be finite). Dividing the stencil sum of val by the same
// stencil's sum of crd gives d val / d crd for any smooth axis spacing.
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

}  // namespace

void validate(const CurrentsOptions& o) {
  if (o.order != 2 && o.order != 4 && o.order != 6)
    throw UsageError("--order: " + std::to_string(o.order) + " is not one of 2, 4, 6");
  if (!(o.equator_band_deg >= 0.0 && o.equator_band_deg <= 30.0))
    throw UsageError("--equator-band: " + std::to_string(o.equator_band_deg) +
                     " is outside 0..30 degrees");
  if (o.gravity == GravityModel::constant &&
      !(o.gravity_value >= 0.1 && o.gravity_value <= 100.0))
    throw UsageError("--gravity: " + std::to_string(o.gravity_value) +
                     " m s-2 is outside 0.1..100");
}

Differentiator::Differentiator(const Grid& grid, int order, bool fallback)
    : grid_(grid), hw_(order / 2), fallback_(fallback) {}

Derivative Differentiator::d_lambda(const Field& band, std::size_t b0, std::size_t j,
                                    std::size_t i) const {
  const double* row = band.row(j - b0);
  const auto nx = static_cast<long>(grid_.nx());
  const auto& lon = grid_.lon_rad();
  const bool periodic = grid_.periodic();
  const long ii = static_cast<long>(i);
  // Coordinate at offset m: across the seam of a periodic grid add 2 pi per wrap.
  auto crd = [&](int m) {
    long k = ii + m;
    double shift = 0.0;
    if (periodic) {
      while (k < 0) { k += nx; shift -= 2.0 * pi; }
      while (k >= nx) { k -= nx; shift += 2.0 * pi; }
    }
    return lon[static_cast<std::size_t>(k)] + shift;
  };
  auto val = [&](int m) {
    long k = ii + m;
    if (periodic) {
      k %= nx;
      if (k < 0) k += nx;
    } else if (k < 0 || k >= nx) {
      return nan;
    }
    return row[k];
  };
  return ladder_d1(val, crd, hw_, fallback_);
}

Derivative Differentiator::d_phi(const Field& band, std::size_t b0, std::size_t j,
                                 std::size_t i) const {
  const long lo = static_cast<long>(b0), hi = static_cast<long>(b0 + band.ny);
  const long jj = static_cast<long>(j);
  const auto& lat = grid_.lat_rad();
  auto crd = [&](int m) {
    const long k = jj + m;
    return (k >= 0 && k < static_cast<long>(lat.size())) ? lat[static_cast<std::size_t>(k)] : nan;
  };
  auto val = [&](int m) {
    const long k = jj + m;
    return (k >= lo && k < hi) ? band.at(static_cast<std::size_t>(k - lo), i) : nan;
  };
  return ladder_d1(val, crd, hw_, fallback_);
}

Derivative Differentiator::d2_phi(const Field& band, std::size_t b0, std::size_t j,
                                  std::size_t i) const {
  const long lo = static_cast<long>(b0), hi = static_cast<long>(b0 + band.ny);
  const long jj = static_cast<long>(j);
  const auto& lat = grid_.lat_rad();
  auto crd = [&](int m) {
    const long k = jj + m;
    return (k >= 0 && k < static_cast<long>(lat.size())) ? lat[static_cast<std::size_t>(k)] : nan;
  };
  auto val = [&](int m) {
    const long k = jj + m;
    return (k >= lo && k < hi) ? band.at(static_cast<std::size_t>(k - lo), i) : nan;
  };
  return ladder_d2(val, crd, hw_, fallback_);
}

GeostrophicKernel::GeostrophicKernel(const Grid& grid, const CurrentsOptions& options)
    : grid_(grid), options_(options),
      diff_(grid, options.order, options.coast == CoastMethod::one_sided) {
  validate(options_);
  constexpr double theta_deg = 2.2;  // blend e-folding latitude [3] (from memory)
  rows_.resize(grid.ny());
  for (std::size_t j = 0; j < grid.ny(); ++j) {
    const double lat = grid.lat_deg()[j];
    const double phi = grid.lat_rad()[j];
    Row r{};
    r.f = coriolis(lat);
    switch (options_.gravity) {
      case GravityModel::standard: r.g = earth::standard_gravity; break;
      case GravityModel::wgs84: r.g = normal_gravity(lat); break;
      case GravityModel::constant: r.g = options_.gravity_value; break;
    }
    double s = 0, c = 0;
    sincosd(lat, s, c);
    r.m = meridional_radius(options_.earth, phi);
    r.n_cos = prime_vertical_radius(options_.earth, phi) * c;
    r.beta = beta(options_.earth, lat);
    r.w_beta = std::exp(-(lat / theta_deg) * (lat / theta_deg));  // W_b = exp(-(phi/theta)^2) [3]
    const bool in_band = std::fabs(lat) < options_.equator_band_deg;
    if (std::fabs(lat) >= 90.0 - 1e-9) {
      r.mode = Row::pole;
    } else if (in_band && options_.equator == EquatorMethod::mask) {
      r.mode = Row::masked_equator;
    } else if (in_band && options_.equator == EquatorMethod::beta) {
      r.mode = Row::beta_plane;
    } else if (in_band && options_.equator == EquatorMethod::blend) {
      r.mode = Row::blend;
    } else if (r.f == 0.0) {
      r.mode = Row::masked_equator;  // band 0 with a row on the equator: f = 0, no estimate
    } else {
      r.mode = Row::f_plane;
    }
    rows_[j] = r;
  }
}

std::size_t GeostrophicKernel::halo_rows() const {
  return static_cast<std::size_t>(diff_.reach());
}

void GeostrophicKernel::compute(const Field& eta, std::size_t e0, std::size_t j0, std::size_t n,
                                Field& u, Field& v, std::vector<std::uint8_t>& flags) const {
  const std::size_t ny = grid_.ny(), nx = grid_.nx(), h = halo_rows();
  const std::size_t need_lo = j0 >= h ? j0 - h : 0;
  const std::size_t need_hi = std::min(ny, j0 + n + h);
  if (eta.nx != nx || e0 > need_lo || e0 + eta.ny < need_hi || j0 + n > ny)
    throw std::logic_error("GeostrophicKernel::compute: height band does not cover the halo");
  u = Field(n, nx, nan);
  v = Field(n, nx, nan);
  flags.assign(n * nx, 0);
  const auto rows = static_cast<long>(n);
#pragma omp parallel for schedule(dynamic, 4)
  for (long r = 0; r < rows; ++r) {
    const auto k = static_cast<std::size_t>(r);
    compute_row(eta, e0, j0 + k, u.row(k), v.row(k), flags.data() + k * nx);
  }
}

void GeostrophicKernel::compute_row(const Field& eta, std::size_t e0, std::size_t j, double* u,
                                    double* v, std::uint8_t* flags) const {
  const Row& r = rows_[j];
  const std::size_t nx = grid_.nx();
  const double* eta_row = eta.row(j - e0);
  for (std::size_t i = 0; i < nx; ++i) {
    if (std::isnan(eta_row[i])) { flags[i] = quality::missing_height; continue; }
    if (r.mode == Row::pole) { flags[i] = quality::masked_pole; continue; }
    if (r.mode == Row::masked_equator) { flags[i] = quality::masked_equator; continue; }
    std::uint8_t flag = 0;
    double uf = nan, vf = nan, ub = nan, vb = nan;
    if (r.mode == Row::f_plane || r.mode == Row::blend) {
      const Derivative dp = diff_.d_phi(eta, e0, j, i);
      const Derivative dl = diff_.d_lambda(eta, e0, j, i);
      if (dp.status != Derivative::failed && dl.status != Derivative::failed && r.f != 0.0) {
        uf = -r.g / (r.f * r.m) * dp.value;      // u = -(g/(f M)) d eta/d phi
        vf = r.g / (r.f * r.n_cos) * dl.value;   // v = (g/(f N cos phi)) d eta/d lambda
        if (dp.status == Derivative::shortened || dl.status == Derivative::shortened)
          flag |= quality::one_sided;
      }
    }
    if (r.mode == Row::beta_plane || r.mode == Row::blend) {
      // u_b = -(g/beta) eta_yy with d2/dy2 = (1/M^2) d2/dphi2 (M stationary at the equator)
      const Derivative d2 = diff_.d2_phi(eta, e0, j, i);
      // v_b = (g/beta) d/dy(eta_x): eta_x = (1/(N cos phi)) d eta/d lambda per row,
      // then d/dy = (1/M) d/dphi of that row-wise quantity.
      Derivative dxy;
      {
        const auto& lat = grid_.lat_rad();
        const long lo = static_cast<long>(e0), hi = static_cast<long>(e0 + eta.ny);
        bool ok_rows = true;
        auto crd = [&](int m) {
          const long k = static_cast<long>(j) + m;
          return (k >= 0 && k < static_cast<long>(lat.size())) ? lat[static_cast<std::size_t>(k)] : nan;
        };
        auto val = [&](int m) {
          const long k = static_cast<long>(j) + m;
          if (k < lo || k >= hi) return nan;
          const auto kk = static_cast<std::size_t>(k);
          const Derivative dl = diff_.d_lambda(eta, e0, kk, i);
          if (dl.status == Derivative::failed) return nan;
          if (dl.status == Derivative::shortened) ok_rows = false;
          return dl.value / rows_[kk].n_cos;
        };
        dxy = ladder_d1(val, crd, options_.order / 2, options_.coast == CoastMethod::one_sided);
        if (!ok_rows && dxy.status == Derivative::full) dxy.status = Derivative::shortened;
      }
      if (d2.status != Derivative::failed && dxy.status != Derivative::failed) {
        ub = -r.g / r.beta * d2.value / (r.m * r.m);
        vb = r.g / r.beta * dxy.value / r.m;
        if (d2.status == Derivative::shortened || dxy.status == Derivative::shortened)
          flag |= quality::one_sided;
      }
    }
    double uu = nan, vv = nan;
    if (r.mode == Row::f_plane) {
      uu = uf; vv = vf;
    } else if (r.mode == Row::beta_plane) {
      uu = ub; vv = vb;
      flag |= quality::beta_plane;
    } else {  // blend [3]: W_b u_b + (1 - W_b) u_f; at f = 0 the f-plane weight is 0
      const double w = r.w_beta;
      if (r.f == 0.0) { uu = ub; vv = vb; }
      else { uu = w * ub + (1.0 - w) * uf; vv = w * vb + (1.0 - w) * vf; }
      flag |= quality::blended;
    }
    if (std::isnan(uu) || std::isnan(vv)) {
      flags[i] = quality::masked_coast;
      continue;
    }
    u[i] = uu;
    v[i] = vv;
    flags[i] = flag;
  }
}

}  // namespace seatilt
