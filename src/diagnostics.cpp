// Notation: j row, i column (global indices); u east, v north (m s-1);
// d/dlambda, d/dphi derivatives per radian from the Differentiator; M, N
// radii of curvature (m). NaN marks an undefined value.
#include "seatilt/diagnostics.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

namespace seatilt {

namespace {
constexpr double nan = std::numeric_limits<double>::quiet_NaN();
}

KinematicsKernel::KinematicsKernel(const Grid& grid, int order, CoastMethod coast,
                                   EarthModel earth)
    : grid_(grid), diff_(grid, order, coast == CoastMethod::one_sided) {
  inv_m_.resize(grid.ny());
  inv_ncos_.resize(grid.ny());
  tan_over_n_.resize(grid.ny());
  for (std::size_t j = 0; j < grid.ny(); ++j) {
    double s = 0, c = 0;
    sincosd(grid.lat_deg()[j], s, c);
    const double m = meridional_radius(earth, grid.lat_rad()[j]);
    const double n = prime_vertical_radius(earth, grid.lat_rad()[j]);
    inv_m_[j] = 1.0 / m;
    inv_ncos_[j] = c > 0.0 ? 1.0 / (n * c) : nan;  // poles: undefined
    tan_over_n_[j] = c > 0.0 ? s / (c * n) : nan;
  }
}

std::size_t KinematicsKernel::halo_rows() const { return static_cast<std::size_t>(diff_.reach()); }

void KinematicsKernel::compute(const Field& u, const Field& v, std::size_t b0, std::size_t j0,
                               std::size_t n, Kinematics& out,
                               std::vector<std::uint8_t>& flags) const {
  const std::size_t ny = grid_.ny(), nx = grid_.nx(), h = halo_rows();
  const std::size_t need_lo = j0 >= h ? j0 - h : 0;
  const std::size_t need_hi = std::min(ny, j0 + n + h);
  if (u.nx != nx || v.nx != nx || u.ny != v.ny || b0 > need_lo || b0 + u.ny < need_hi ||
      flags.size() != n * nx)
    throw std::logic_error("KinematicsKernel::compute: velocity band does not cover the halo");
  for (Field* f : {&out.speed, &out.vorticity, &out.strain_normal, &out.strain_shear,
                   &out.strain, &out.okubo_weiss})
    f->reset(n, nx, nan);
  const auto rows = static_cast<long>(n);
#pragma omp parallel for schedule(dynamic, 4)
  for (long r = 0; r < rows; ++r) {
    const auto k = static_cast<std::size_t>(r);
    const std::size_t j = j0 + k;
    const double* ur = u.row(j - b0);
    const double* vr = v.row(j - b0);
    std::uint8_t* fl = flags.data() + k * nx;
    for (std::size_t i = 0; i < nx; ++i) {
      const double uc = ur[i], vc = vr[i];
      if (std::isnan(uc) || std::isnan(vc)) continue;
      out.speed.at(k, i) = std::sqrt(uc * uc + vc * vc);  // |u| = sqrt(u^2 + v^2) (no overflow: |u| << 1e150)
      const Derivative ul = diff_.d_lambda(u, b0, j, i), vl = diff_.d_lambda(v, b0, j, i);
      const Derivative up = diff_.d_phi(u, b0, j, i), vp = diff_.d_phi(v, b0, j, i);
      if (ul.status == Derivative::failed || vl.status == Derivative::failed ||
          up.status == Derivative::failed || vp.status == Derivative::failed)
        continue;
      if (ul.status == Derivative::shortened || vl.status == Derivative::shortened ||
          up.status == Derivative::shortened || vp.status == Derivative::shortened)
        fl[i] |= quality::one_sided;
      const double a = inv_ncos_[j], b = inv_m_[j], t = tan_over_n_[j];
      const double zeta = a * vl.value - b * up.value + uc * t;  // REFERENCES §6
      const double sn = a * ul.value - b * vp.value - vc * t;
      const double ss = a * vl.value + b * up.value + uc * t;
      out.vorticity.at(k, i) = zeta;
      out.strain_normal.at(k, i) = sn;
      out.strain_shear.at(k, i) = ss;
      out.strain.at(k, i) = std::sqrt(sn * sn + ss * ss);  // sqrt(sn^2 + ss^2)
      out.okubo_weiss.at(k, i) = sn * sn + ss * ss - zeta * zeta;  // W = sn^2 + ss^2 - zeta^2
    }
  }
}

void KinematicsKernel::vorticity(const Field& u, const Field& v, std::size_t b0, std::size_t j0,
                                 std::size_t n, Field& zeta) const {
  const std::size_t ny = grid_.ny(), nx = grid_.nx(), h = halo_rows();
  const std::size_t need_lo = j0 >= h ? j0 - h : 0;
  const std::size_t need_hi = std::min(ny, j0 + n + h);
  if (u.nx != nx || v.nx != nx || u.ny != v.ny || b0 > need_lo || b0 + u.ny < need_hi)
    throw std::logic_error("KinematicsKernel::vorticity: velocity band does not cover the halo");
  zeta.reset(n, nx, nan);
  const auto rows = static_cast<long>(n);
#pragma omp parallel for schedule(dynamic, 4)
  for (long r = 0; r < rows; ++r) {
    const auto k = static_cast<std::size_t>(r);
    const std::size_t j = j0 + k;
    const double* ur = u.row(j - b0);
    const double* vr = v.row(j - b0);
    for (std::size_t i = 0; i < nx; ++i) {
      const double uc = ur[i], vc = vr[i];
      if (std::isnan(uc) || std::isnan(vc)) continue;
      const Derivative vl = diff_.d_lambda(v, b0, j, i);
      const Derivative up = diff_.d_phi(u, b0, j, i);
      if (vl.status == Derivative::failed || up.status == Derivative::failed) continue;
      // zeta = (1/(N cos phi)) dv/dlambda - (1/M) du/dphi + u tan(phi)/N, as compute() (REFERENCES §6)
      zeta.at(k, i) = inv_ncos_[j] * vl.value - inv_m_[j] * up.value + uc * tan_over_n_[j];
    }
  }
}

// ---- projected and curvilinear grids (diagnostics.hpp) -------------------------------
// Notation: V = (Vx, Vy, Vz) earth-centred velocity components (m s-1);
// e_hat = (-sin lam, cos lam, 0), n_hat = (-sin phi cos lam, -sin phi sin lam, cos phi).

CurvilinearKinematicsKernel::CurvilinearKinematicsKernel(const CurvilinearGrid& grid, int order,
                                                         CoastMethod coast)
    : grid_(grid), diff_(grid, order, coast == CoastMethod::one_sided) {}

std::size_t CurvilinearKinematicsKernel::halo_rows() const {
  return static_cast<std::size_t>(diff_.reach());
}

void CurvilinearKinematicsKernel::compute(const Field& u, const Field& v, std::size_t b0,
                                          std::size_t j0, std::size_t n, Kinematics& out,
                                          std::vector<std::uint8_t>& flags) const {
  const std::size_t ny = grid_.ny(), nx = grid_.nx(), h = halo_rows();
  const std::size_t need_lo = j0 >= h ? j0 - h : 0;
  const std::size_t need_hi = std::min(ny, j0 + n + h);
  if (u.nx != nx || v.nx != nx || u.ny != v.ny || b0 > need_lo || b0 + u.ny < need_hi ||
      flags.size() != n * nx)
    throw std::logic_error(
        "CurvilinearKinematicsKernel::compute: velocity band does not cover the halo");
  for (Field* f : {&out.speed, &out.vorticity, &out.strain_normal, &out.strain_shear, &out.strain,
                   &out.okubo_weiss})
    f->reset(n, nx, nan);

  // Earth-centred components of rows [need_lo, need_hi): V = u e_hat + v n_hat.
  const std::size_t rows = need_hi - need_lo;
  Field vx(rows, nx, nan), vy(rows, nx, nan), vz(rows, nx, nan);
#pragma omp parallel for schedule(static)
  for (long rl = 0; rl < static_cast<long>(rows); ++rl) {
    const auto r = static_cast<std::size_t>(rl);
    const std::size_t j = need_lo + r;
    const double* ur = u.row(j - b0);
    const double* vr = v.row(j - b0);
    for (std::size_t i = 0; i < nx; ++i) {
      if (std::isnan(ur[i]) || std::isnan(vr[i])) continue;
      double sp = 0, cp = 0, sl = 0, cl = 0;
      sincosd(grid_.lat_deg(j, i), sp, cp);
      sincosd(grid_.lon_deg(j, i), sl, cl);
      vx.at(r, i) = -ur[i] * sl - vr[i] * sp * cl;
      vy.at(r, i) = ur[i] * cl - vr[i] * sp * sl;
      vz.at(r, i) = vr[i] * cp;
    }
  }

#pragma omp parallel for schedule(dynamic, 4)
  for (long rl = 0; rl < static_cast<long>(n); ++rl) {
    const auto k = static_cast<std::size_t>(rl);
    const std::size_t j = j0 + k;
    const double* ur = u.row(j - b0);
    const double* vr = v.row(j - b0);
    std::uint8_t* fl = flags.data() + k * nx;
    for (std::size_t i = 0; i < nx; ++i) {
      const double uc = ur[i], vc = vr[i];
      if (std::isnan(uc) || std::isnan(vc)) continue;
      out.speed.at(k, i) = std::sqrt(uc * uc + vc * vc);  // |u| = sqrt(u^2 + v^2) (no overflow: |u| << 1e150)
      const Gradient gx = diff_.gradient(vx, need_lo, j, i);
      const Gradient gy = diff_.gradient(vy, need_lo, j, i);
      const Gradient gz = diff_.gradient(vz, need_lo, j, i);
      if (gx.status == Derivative::failed || gy.status == Derivative::failed ||
          gz.status == Derivative::failed)
        continue;
      if (gx.status == Derivative::shortened || gy.status == Derivative::shortened ||
          gz.status == Derivative::shortened)
        fl[i] |= quality::one_sided;
      double sp = 0, cp = 0, sl = 0, cl = 0;
      sincosd(grid_.lat_deg(j, i), sp, cp);
      sincosd(grid_.lon_deg(j, i), sl, cl);
      // e_hat . dV/de, n_hat . dV/de, e_hat . dV/dn, n_hat . dV/dn
      const double ee = -sl * gx.e + cl * gy.e;
      const double ne = -sp * cl * gx.e - sp * sl * gy.e + cp * gz.e;
      const double en = -sl * gx.n + cl * gy.n;
      const double nn = -sp * cl * gx.n - sp * sl * gy.n + cp * gz.n;
      const double zeta = ne - en;  // = dv/de - du/dn + u tan(phi)/N   (REFERENCES §6)
      const double sn = ee - nn;    // = du/de - dv/dn - v tan(phi)/N
      const double ss = ne + en;    // = dv/de + du/dn + u tan(phi)/N
      out.vorticity.at(k, i) = zeta;
      out.strain_normal.at(k, i) = sn;
      out.strain_shear.at(k, i) = ss;
      out.strain.at(k, i) = std::sqrt(sn * sn + ss * ss);  // sqrt(sn^2 + ss^2)
      out.okubo_weiss.at(k, i) = sn * sn + ss * ss - zeta * zeta;  // W = sn^2 + ss^2 - zeta^2
    }
  }
}

}  // namespace seatilt
