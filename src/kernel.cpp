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
#include "stencil.hpp"

namespace seatilt {

namespace {

constexpr double pi = 3.14159265358979323846;
constexpr double nan = std::numeric_limits<double>::quiet_NaN();

using detail::ladder_d1;  // stencil ladder (stencil.hpp)
using detail::ladder_d2;

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
    : grid_(grid), hw_(order / 2), fallback_(fallback) {
  // Full-stencil denominators sum_m c_m (x_{+m} - x_{-m}), summed from m = hw
  // down to 1 exactly as ladder_d1 does, so the fast path divides by the same
  // double (stencil.hpp; "derivatives by mapping").
  const auto& lon = grid.lon_rad();
  const auto& lat = grid.lat_rad();
  den_lambda_.assign(lon.size(), nan);
  den_phi_.assign(lat.size(), nan);
  if (hw_ < 1 || hw_ > 3) return;
  const auto hw = static_cast<std::size_t>(hw_);
  auto den_of = [&](const std::vector<double>& x, std::size_t k) {
    double den = 0.0;
    for (int m = hw_; m >= 1; --m) {
      const auto mm = static_cast<std::size_t>(m);
      den += detail::c1[hw_ - 1][m - 1] * (x[k + mm] - x[k - mm]);
    }
    return den;
  };
  for (std::size_t i = hw; i + hw < lon.size(); ++i) den_lambda_[i] = den_of(lon, i);
  for (std::size_t j = hw; j + hw < lat.size(); ++j) den_phi_[j] = den_of(lat, j);
}

bool Differentiator::centred(const double* p, std::ptrdiff_t stride, double den,
                             double& value) const {
  for (int m = 1; m <= hw_; ++m)
    if (std::isnan(p[m * stride]) || std::isnan(p[-m * stride])) return false;
  // Centred first derivative, weights c1 (REFERENCES.md §3), per radian.
  double num = 0.0;
  for (int m = hw_; m >= 1; --m)
    num += detail::c1[hw_ - 1][m - 1] * (p[m * stride] - p[-m * stride]);
  value = num / den;
  return true;
}

Derivative Differentiator::d_lambda(const Field& band, std::size_t b0, std::size_t j,
                                    std::size_t i) const {
  const double* row = band.row(j - b0);
  if (const double den = den_lambda_[i]; !std::isnan(den)) {
    Derivative d;
    if (centred(row + i, 1, den, d.value)) {
      d.status = Derivative::full;
      return d;
    }
  }
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
  if (const double den = den_phi_[j]; !std::isnan(den) && jj - hw_ >= lo && jj + hw_ < hi) {
    Derivative d;
    if (centred(band.row(j - b0) + i, static_cast<std::ptrdiff_t>(band.nx), den, d.value)) {
      d.status = Derivative::full;
      return d;
    }
  }
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
  u.reset(n, nx, nan);
  v.reset(n, nx, nan);
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

// ---- projected and curvilinear grids (kernel.hpp) ------------------------------------
// Notation: c column coordinate, r row coordinate (grid.hpp); B node metric;
// eta_e, eta_n east and north derivatives of eta (m-1 x height units).

CurvilinearDifferentiator::CurvilinearDifferentiator(const CurvilinearGrid& grid, int order,
                                                     bool fallback)
    : grid_(grid), hw_(order / 2), fallback_(fallback) {}

Derivative CurvilinearDifferentiator::d_col(const Field& band, std::size_t b0, std::size_t j,
                                            std::size_t i) const {
  const double* row = band.row(j - b0);
  const auto nx = static_cast<long>(grid_.nx());
  const auto& c = grid_.col_coord();
  const long ii = static_cast<long>(i);
  auto crd = [&](int m) {
    const long k = ii + m;
    return (k >= 0 && k < nx) ? c[static_cast<std::size_t>(k)] : nan;
  };
  auto val = [&](int m) {
    const long k = ii + m;
    return (k >= 0 && k < nx) ? row[k] : nan;
  };
  return ladder_d1(val, crd, hw_, fallback_);
}

Derivative CurvilinearDifferentiator::d_row(const Field& band, std::size_t b0, std::size_t j,
                                            std::size_t i) const {
  const long lo = static_cast<long>(b0), hi = static_cast<long>(b0 + band.ny);
  const long jj = static_cast<long>(j);
  const auto& r = grid_.row_coord();
  auto crd = [&](int m) {
    const long k = jj + m;
    return (k >= 0 && k < static_cast<long>(r.size())) ? r[static_cast<std::size_t>(k)] : nan;
  };
  auto val = [&](int m) {
    const long k = jj + m;
    return (k >= lo && k < hi) ? band.at(static_cast<std::size_t>(k - lo), i) : nan;
  };
  return ladder_d1(val, crd, hw_, fallback_);
}

Gradient CurvilinearDifferentiator::gradient(const Field& band, std::size_t b0, std::size_t j,
                                             std::size_t i) const {
  Gradient g;
  if (grid_.at_pole(j, i)) return g;
  const Derivative dc = d_col(band, b0, j, i);
  if (dc.status == Derivative::failed) return g;
  const Derivative dr = d_row(band, b0, j, i);
  if (dr.status == Derivative::failed) return g;
  const DirectionalMetric& b = grid_.metric(j, i);
  g.e = b.e_c * dc.value + b.e_r * dr.value;  // d/de = B.e_c d/dc + B.e_r d/dr (grid.hpp)
  g.n = b.n_c * dc.value + b.n_r * dr.value;  // d/dn = B.n_c d/dc + B.n_r d/dr
  g.status = (dc.status == Derivative::shortened || dr.status == Derivative::shortened)
                 ? Derivative::shortened
                 : Derivative::full;
  return g;
}

CurvilinearGeostrophicKernel::CurvilinearGeostrophicKernel(const CurvilinearGrid& grid,
                                                           const CurrentsOptions& options)
    : grid_(grid),
      options_(options),
      diff_(grid, options.order, options.coast == CoastMethod::one_sided) {
  validate(options_);
  for (std::size_t j = 0; j < grid.ny() && !nested_; ++j)
    for (std::size_t i = 0; i < grid.nx() && !nested_; ++i) {
      const Mode m = mode_of(j, i);
      nested_ = m == beta_plane || m == blend;
    }
}

CurvilinearGeostrophicKernel::Mode CurvilinearGeostrophicKernel::mode_of(std::size_t j,
                                                                         std::size_t i) const {
  const double lat = grid_.lat_deg(j, i);
  if (grid_.at_pole(j, i)) return pole;
  const bool in_band = std::fabs(lat) < options_.equator_band_deg;
  if (in_band && options_.equator == EquatorMethod::mask) return masked_equator;
  if (in_band && options_.equator == EquatorMethod::beta) return beta_plane;
  if (in_band && options_.equator == EquatorMethod::blend) return blend;
  if (coriolis(lat) == 0.0) return masked_equator;  // band 0 with a node on the equator
  return f_plane;
}

std::size_t CurvilinearGeostrophicKernel::halo_rows() const {
  const auto h = static_cast<std::size_t>(diff_.reach());
  return nested_ ? 2 * h : h;
}

void CurvilinearGeostrophicKernel::compute(const Field& eta, std::size_t e0, std::size_t j0,
                                           std::size_t n, Field& u, Field& v,
                                           std::vector<std::uint8_t>& flags) const {
  const std::size_t ny = grid_.ny(), nx = grid_.nx(), h = halo_rows();
  const std::size_t need_lo = j0 >= h ? j0 - h : 0;
  const std::size_t need_hi = std::min(ny, j0 + n + h);
  if (eta.nx != nx || e0 > need_lo || e0 + eta.ny < need_hi || j0 + n > ny)
    throw std::logic_error(
        "CurvilinearGeostrophicKernel::compute: height band does not cover the halo");
  u.reset(n, nx, nan);
  v.reset(n, nx, nan);
  flags.assign(n * nx, 0);
  const auto rows = static_cast<long>(n);
#pragma omp parallel for schedule(dynamic, 4)
  for (long r = 0; r < rows; ++r) {
    const auto k = static_cast<std::size_t>(r);
    compute_row(eta, e0, j0 + k, u.row(k), v.row(k), flags.data() + k * nx);
  }
}

void CurvilinearGeostrophicKernel::compute_row(const Field& eta, std::size_t e0, std::size_t j,
                                               double* u, double* v, std::uint8_t* flags) const {
  constexpr double theta_deg = 2.2;  // blend e-folding latitude [3] (from memory)
  const std::size_t nx = grid_.nx();
  const int hw = options_.order / 2, reach = diff_.reach();
  const bool fallback = options_.coast == CoastMethod::one_sided;
  const double* eta_row = eta.row(j - e0);
  const long lo = static_cast<long>(e0), hi = static_cast<long>(e0 + eta.ny);
  const auto& cc = grid_.col_coord();
  const auto& rc = grid_.row_coord();
  for (std::size_t i = 0; i < nx; ++i) {
    if (std::isnan(eta_row[i])) {
      flags[i] = quality::missing_height;
      continue;
    }
    const Mode mode = mode_of(j, i);
    if (mode == pole) {
      flags[i] = quality::masked_pole;
      continue;
    }
    if (mode == masked_equator) {
      flags[i] = quality::masked_equator;
      continue;
    }
    const double lat = grid_.lat_deg(j, i);
    const double f = coriolis(lat);
    double g = options_.gravity_value;
    if (options_.gravity == GravityModel::standard)
      g = earth::standard_gravity;
    else if (options_.gravity == GravityModel::wgs84)
      g = normal_gravity(lat);
    std::uint8_t flag = 0;
    double uf = nan, vf = nan, ub = nan, vb = nan;
    if (mode == f_plane || mode == blend) {
      const Gradient gr = diff_.gradient(eta, e0, j, i);
      if (gr.status != Derivative::failed && f != 0.0) {
        uf = -g / f * gr.n;  // u = -(g/f) d eta/dn   [4] ch. 10
        vf = g / f * gr.e;   // v =  (g/f) d eta/de
        if (gr.status == Derivative::shortened) flag |= quality::one_sided;
      }
    }
    if (mode == beta_plane || mode == blend) {
      // Inner gradients at the neighbours along the row and the column, at
      // every offset the outer ladder may ask for (-reach..reach, reach <= 3).
      double ce[7], cn[7], re[7], rn[7];
      bool inner_shortened = false;
      for (int m = -reach; m <= reach; ++m) {
        const long ic = static_cast<long>(i) + m, jr = static_cast<long>(j) + m;
        Gradient gc, gr;
        if (ic >= 0 && ic < static_cast<long>(nx))
          gc = diff_.gradient(eta, e0, j, static_cast<std::size_t>(ic));
        if (jr >= lo && jr < hi) gr = diff_.gradient(eta, e0, static_cast<std::size_t>(jr), i);
        const bool okc = gc.status != Derivative::failed, okr = gr.status != Derivative::failed;
        // Offsets beyond hw enter only a fallback stencil, which is flagged anyway.
        if (m >= -hw && m <= hw)
          inner_shortened = inner_shortened || gc.status == Derivative::shortened ||
                            gr.status == Derivative::shortened;
        ce[m + reach] = okc ? gc.e : nan;
        cn[m + reach] = okc ? gc.n : nan;
        re[m + reach] = okr ? gr.e : nan;
        rn[m + reach] = okr ? gr.n : nan;
      }
      const auto crd_c = [&](int m) {
        const long k = static_cast<long>(i) + m;
        return (k >= 0 && k < static_cast<long>(nx)) ? cc[static_cast<std::size_t>(k)] : nan;
      };
      const auto crd_r = [&](int m) {
        const long k = static_cast<long>(j) + m;
        return (k >= 0 && k < static_cast<long>(rc.size())) ? rc[static_cast<std::size_t>(k)] : nan;
      };
      const auto from = [&](const double* a) {
        return [a, reach](int m) { return (m < -reach || m > reach) ? nan : a[m + reach]; };
      };
      const Derivative dnc = ladder_d1(from(cn), crd_c, hw, fallback);
      const Derivative dnr = ladder_d1(from(rn), crd_r, hw, fallback);
      const Derivative dec = ladder_d1(from(ce), crd_c, hw, fallback);
      const Derivative der = ladder_d1(from(re), crd_r, hw, fallback);
      if (dnc.status != Derivative::failed && dnr.status != Derivative::failed &&
          dec.status != Derivative::failed && der.status != Derivative::failed) {
        const DirectionalMetric& b = grid_.metric(j, i);
        const double phi = lat * pi / 180.0;
        // beta = 2 Omega cos(phi) / M on the grid's figure (kernel.hpp [2]; grid.hpp beta)
        double s = 0, c = 0;
        sincosd(lat, s, c);
        const double bet = 2.0 * earth::omega * c / meridional_radius(grid_.ellipsoid(), phi);
        const double eta_nn = b.n_c * dnc.value + b.n_r * dnr.value;  // d/dn (d eta/dn)
        const double eta_en = b.n_c * dec.value + b.n_r * der.value;  // d/dn (d eta/de)
        // u_b = -(g/beta) eta_yy,  v_b = (g/beta) eta_xy  [2]
        ub = -g / bet * eta_nn;
        vb = g / bet * eta_en;
        if (inner_shortened || dnc.status == Derivative::shortened ||
            dnr.status == Derivative::shortened || dec.status == Derivative::shortened ||
            der.status == Derivative::shortened)
          flag |= quality::one_sided;
      }
    }
    double uu = nan, vv = nan;
    if (mode == f_plane) {
      uu = uf;
      vv = vf;
    } else if (mode == beta_plane) {
      uu = ub;
      vv = vb;
      flag |= quality::beta_plane;
    } else {  // blend [3]: W_b u_b + (1 - W_b) u_f; at f = 0 the f-plane weight is 0
      const double w = std::exp(-(lat / theta_deg) * (lat / theta_deg));
      if (f == 0.0) {
        uu = ub;
        vv = vb;
      } else {
        uu = w * ub + (1.0 - w) * uf;
        vv = w * vb + (1.0 - w) * vf;
      }
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
