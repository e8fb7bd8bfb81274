// seatilt/diagnostics.hpp — kinematic diagnostics of a horizontal velocity field.
//
// Owns: speed, relative vorticity, normal and shear strain, total strain and
// the Okubo–Weiss parameter on the sphere or ellipsoid, with their metric
// terms, on latitude-longitude grids (KinematicsKernel) and on projected or
// curvilinear grids (CurvilinearKinematicsKernel). Does not own u, v
// (kernel.hpp) or I/O.
//
// Method (orthogonal curvilinear coordinates on the ellipsoid; u east, v
// north; N replaces R in lambda-derivatives and tan(phi) terms, M in phi-
// derivatives; REFERENCES.md §6, e.g. [1] §2 for the spherical forms):
//   zeta = (1/(N cos phi)) dv/dlambda - (1/M) du/dphi + u tan(phi)/N     (s-1)
//   sn   = (1/(N cos phi)) du/dlambda - (1/M) dv/dphi - v tan(phi)/N     (s-1)
//   ss   = (1/(N cos phi)) dv/dlambda + (1/M) du/dphi + u tan(phi)/N     (s-1)
//   strain = sqrt(sn^2 + ss^2)                                           (s-1)
//   W = sn^2 + ss^2 - zeta^2   (Okubo 1970 [2]; Weiss 1991 [3])          (s-2)
//   speed = sqrt(u^2 + v^2)                                              (m s-1)
// Solid-body rotation about any axis has zero strain; the metric terms are
// what make that true (tested).
//
// References
//  [1] G. K. Vallis (2017), Atmospheric and Oceanic Fluid Dynamics, 2nd ed.,
//      Cambridge University Press, ch. 2 (equations on the sphere).
//  [2] A. Okubo (1970), Horizontal dispersion of floatable particles in the
//      vicinity of velocity singularities such as convergences, Deep-Sea Res.
//      17, 445-454.
//  [3] J. Weiss (1991), The dynamics of enstrophy transfer in two-dimensional
//      hydrodynamics, Physica D 48, 273-294.
//
// Accuracy: the stencil's truncation error (kernel.hpp).
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "seatilt/grid.hpp"
#include "seatilt/kernel.hpp"

namespace seatilt {

/// Diagnostics for a band of rows; each Field is n x nx, NaN where undefined.
struct Kinematics {
  Field speed, vorticity, strain_normal, strain_shear, strain, okubo_weiss;
};

/// Computes Kinematics from u, v with the stencil ladder of kernel.hpp.
class KinematicsKernel {
public:
  /// ORDER 2, 4, 6 and COAST as for the velocities; EARTH selects M, N.
  KinematicsKernel(const Grid& grid, int order, CoastMethod coast, EarthModel earth);

  /// Rows of u, v needed above and below the output rows.
  [[nodiscard]] std::size_t halo_rows() const;

  /// Computes diagnostics for global rows [j0, j0 + n) from U, V (m s-1, NaN
  /// where masked) holding global rows [b0, b0 + u.ny) (must cover the halo
  /// within the grid; std::logic_error otherwise). Cells whose u or v is NaN
  /// stay NaN; a cell whose derivatives needed a shortened stencil gets
  /// quality::one_sided OR-ed into FLAGS (n * nx, as produced by the kernel);
  /// a cell with no usable stencil gets NaN diagnostics (u, v kept).
  void compute(const Field& u, const Field& v, std::size_t b0, std::size_t j0, std::size_t n,
               Kinematics& out, std::vector<std::uint8_t>& flags) const;

  /// Relative vorticity alone (s-1; NaN where compute() gives NaN), for
  /// callers that need nothing else (climatologies). Equal, bit for bit, to
  /// compute()'s vorticity when u and v are missing at the same cells (as
  /// the geostrophic kernel and seatilt's outputs have them): it evaluates
  /// only dv/dlambda and du/dphi, whose stencils then succeed or fail
  /// together with du/dlambda and dv/dphi. Same preconditions as compute();
  /// ZETA is resized to n x nx.
  void vorticity(const Field& u, const Field& v, std::size_t b0, std::size_t j0, std::size_t n,
                 Field& zeta) const;

private:
  const Grid& grid_;
  Differentiator diff_;
  std::vector<double> inv_m_, inv_ncos_, tan_over_n_;
};

/// Computes Kinematics on a projected or curvilinear grid (grid.hpp).
///
/// Method: the same formulas (REFERENCES.md §6) in directional form,
///   zeta = dv/de - du/dn + u tan(phi)/N,  sn = du/de - dv/dn - v tan(phi)/N,
///   ss = dv/de + du/dn + u tan(phi)/N,
/// evaluated through the earth-centred components of the velocity,
/// V = u e_hat + v n_hat (smooth across a pole, where u and v are not):
///   zeta = n_hat . dV/de - e_hat . dV/dn,  sn = e_hat . dV/de - n_hat . dV/dn,
///   ss = n_hat . dV/de + e_hat . dV/dn,
/// with the east/north derivatives of each component from
/// CurvilinearDifferentiator::gradient. Expanding dV/de with d(e_hat)/de =
/// (tan(phi)/N) n_hat - (1/N) r_hat, d(n_hat)/de = -(tan(phi)/N) e_hat and
/// d(e_hat)/dn = 0, d(n_hat)/dn normal to the surface gives exactly the
/// metric terms above (ellipsoid: d(N cos phi)/dphi = -M sin phi).
class CurvilinearKinematicsKernel {
public:
  /// ORDER 2, 4, 6 and COAST as for the velocities; the figure for the metric
  /// terms is GRID's (grid.hpp CurvilinearGrid::ellipsoid). Keeps a reference to GRID.
  CurvilinearKinematicsKernel(const CurvilinearGrid& grid, int order, CoastMethod coast);

  /// Rows of u, v needed above and below the output rows.
  [[nodiscard]] std::size_t halo_rows() const;

  /// As KinematicsKernel::compute: diagnostics for global rows [j0, j0 + n)
  /// from U, V (m s-1, east and north, NaN where masked) holding global rows
  /// [b0, b0 + u.ny) that cover the halo within the grid (std::logic_error
  /// otherwise); quality::one_sided OR-ed into FLAGS (n * nx) where a
  /// shortened stencil was needed; NaN diagnostics where no stencil fits.
  void compute(const Field& u, const Field& v, std::size_t b0, std::size_t j0, std::size_t n,
               Kinematics& out, std::vector<std::uint8_t>& flags) const;

private:
  const CurvilinearGrid& grid_;
  CurvilinearDifferentiator diff_;
};

}  // namespace seatilt
