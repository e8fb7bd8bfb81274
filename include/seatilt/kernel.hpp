// seatilt/kernel.hpp — finite differences on the sphere and geostrophic u, v.
//
// Owns: the stencil ladder (centred differences of order 2, 4, 6, shortened
// and one-sided fallbacks next to missing cells and domain edges), the
// geostrophic velocity with f-plane, beta-plane and blended equatorial
// treatments, and the per-cell quality flag, on latitude-longitude grids
// (GeostrophicKernel) and on projected or curvilinear grids
// (CurvilinearGeostrophicKernel). Does not own I/O, row-band scheduling
// (tiling.hpp) or the kinematic diagnostics (diagnostics.hpp).
//
// Method
//  Away from the equator (geostrophic balance on the rotating ellipsoid,
//  e.g. [4] ch. 10):
//    u = -(g / (f M)) d(eta)/d(phi)            (m s-1)
//    v =  (g / (f N cos(phi))) d(eta)/d(lambda) (m s-1)
//  with f = 2 Omega sin(phi), M, N the radii of curvature (grid.hpp).
//  Near the equator f -> 0. Beta-plane form [2]: differentiating f u = -g eta_y
//  and f v = g eta_x with f = beta y and evaluating at y = 0,
//    u_b = -(g / beta) d2(eta)/dy2,   v_b = (g / beta) d2(eta)/dxdy,
//  with beta = 2 Omega cos(phi) / M, d/dy = (1/M) d/dphi (dM/dphi = 0 at the
//  equator, so M is held constant across the stencil), d/dx = 1/(N cos phi) d/dlambda.
//  Blend [3]: u = W u_b + (1 - W) u_f with W = exp(-(phi/theta)^2),
//  theta = 2.2 deg latitude (W = 0.0057 at 5 deg), likewise v.
//  Derivatives in index space are divided by the coordinate's derivative
//  taken with the same stencil (d eta/d phi = (sum c_k eta_k)/(sum c_k phi_k)),
//  so non-uniform and descending axes need no special case.
//  Centred first-derivative stencils [1]: 3-point (-1,0,1)/2h, 5-point
//  (1,-8,0,8,-1)/12h, 7-point (-1,9,-45,0,45,-9,1)/60h; one-sided fallback
//  (-3,4,-1)/2h (2nd order), then (-1,1)/h. Second derivatives: (1,-2,1)/h2,
//  (-1,16,-30,16,-1)/12h2, (2,-27,270,-490,270,-27,2)/180h2.
//
// References
//  [1] Arbic, Scott, Chelton, Richman & Shriver (2012), Effects of stencil
//      width on surface ocean geostrophic velocity and vorticity estimation
//      from gridded satellite altimeter data, JGR 117, C03029,
//      doi:10.1029/2011JC007367.
//  [2] Picaut, Hayes & McPhaden (1989/1990), Use of the geostrophic
//      approximation to estimate time-varying zonal currents at the equator,
//      JGR 95(C3), 3015-3024 (beta-plane second-derivative form).
//  [3] Lagerloef, Mitchum, Lukas & Niiler (1999), Tropical Pacific
//      near-surface currents estimated from altimeter, wind, and drifter
//      data, JGR 104(C10), 23313-23326 (blending weights; theta from memory).
//  [4] R. H. Stewart, Introduction to Physical Oceanography, ch. 10.
//
// Accuracy: truncation error O(h^p) for order p on smooth fields (tested:
// the error falls ~4x and ~16x per halving of h for p = 2, 4); amplitude
// response of the 3-point stencil sin(kh)/kh [1].
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "seatilt/grid.hpp"

namespace seatilt {

/// Equatorial treatment.
enum class EquatorMethod {
  mask,   ///< |lat| < band -> fill
  beta,   ///< |lat| < band -> beta-plane second-derivative form [2]
  blend,  ///< |lat| < band -> Lagerloef et al. (1999) weights [3]
};

/// What to do where a full centred stencil does not fit (coast, domain edge).
enum class CoastMethod {
  one_sided,  ///< shortened or one-sided differences, flagged
  mask,       ///< fill
};

/// Options of the geostrophic computation, resolved once per run.
struct CurrentsOptions {
  int order = 2;                                ///< 2, 4 or 6
  EquatorMethod equator = EquatorMethod::blend;
  double equator_band_deg = 5.0;                ///< half-width (degrees), 0..30
  CoastMethod coast = CoastMethod::one_sided;
  EarthModel earth = EarthModel::wgs84;
  GravityModel gravity = GravityModel::standard;
  double gravity_value = earth::standard_gravity;  ///< m s-2, used with GravityModel::constant
};

/// Quality flag bits (CF flag_masks), one byte per cell.
namespace quality {
inline constexpr std::uint8_t one_sided = 1;        ///< shortened/one-sided stencil near coast or edge
inline constexpr std::uint8_t beta_plane = 2;       ///< equatorial beta-plane form
inline constexpr std::uint8_t blended = 4;          ///< beta/f-plane blend
inline constexpr std::uint8_t missing_height = 8;   ///< no height at the cell (land, fill)
inline constexpr std::uint8_t masked_equator = 16;  ///< inside the masked equatorial band
inline constexpr std::uint8_t masked_pole = 32;     ///< at a pole
inline constexpr std::uint8_t masked_coast = 64;    ///< no usable stencil (or --coast mask)
inline constexpr std::uint8_t masked_any =
    missing_height | masked_equator | masked_pole | masked_coast;
/// CF flag_meanings in bit order.
inline constexpr const char* meanings =
    "one_sided_difference beta_plane_equator blended_equator missing_height "
    "masked_equator_band masked_pole masked_near_coast";
}  // namespace quality

/// Checks options; throws UsageError naming the bad option.
void validate(const CurrentsOptions& options);

/// Result of one derivative: value per radian of the coordinate, and how it was obtained.
struct Derivative {
  enum Status : std::uint8_t { full, shortened, failed };
  double value = 0.0;
  Status status = failed;
};

/// First and second derivatives along grid rows and columns of a row band,
/// with the stencil ladder. A band holds global rows [b0, b0 + band.ny);
/// rows outside the band or the grid, columns outside a non-periodic grid,
/// and NaN cells are missing.
class Differentiator {
public:
  /// ORDER 2, 4 or 6; FALLBACK false refuses any stencil but the full centred one.
  Differentiator(const Grid& grid, int order, bool fallback);
  /// d f / d lambda (per radian) at global row j, column i.
  [[nodiscard]] Derivative d_lambda(const Field& band, std::size_t b0, std::size_t j, std::size_t i) const;
  /// d f / d phi (per radian) at global row j, column i.
  [[nodiscard]] Derivative d_phi(const Field& band, std::size_t b0, std::size_t j, std::size_t i) const;
  /// d2 f / d phi2 (per radian^2); centred stencils only (shortened allowed with fallback).
  [[nodiscard]] Derivative d2_phi(const Field& band, std::size_t b0, std::size_t j, std::size_t i) const;
  /// Half-width of the widest stencil in rows (>= 2: one-sided needs two neighbours).
  [[nodiscard]] int reach() const { return hw_ < 2 ? 2 : hw_; }
  [[nodiscard]] const Grid& grid() const { return grid_; }

private:
  /// The full centred stencil at an interior point (no seam, no grid edge),
  /// or false when one of its values is missing. Same arithmetic, in the same
  /// order, as the ladder (stencil.hpp), so the result is bit-identical.
  bool centred(const double* p, std::ptrdiff_t stride, double den, double& value) const;

  const Grid& grid_;
  int hw_;
  bool fallback_;
  // Denominators of the full centred stencil (stencil . coordinate) by
  // column and by row where the stencil stays inside the grid without
  // wrapping; NaN elsewhere (then the general ladder runs).
  std::vector<double> den_lambda_, den_phi_;
};

/// Geostrophic surface velocity on a latitude-longitude grid.
class GeostrophicKernel {
public:
  /// Prepares per-row terms (f, M, N, cos phi, g, beta, blend weight) once.
  /// Throws UsageError for invalid options.
  GeostrophicKernel(const Grid& grid, const CurrentsOptions& options);

  /// Rows of height needed above and below the output rows.
  [[nodiscard]] std::size_t halo_rows() const;

  /// Computes u, v (m s-1, NaN where masked) and FLAGS for global rows
  /// [j0, j0 + n) from heights ETA (m, NaN missing) holding global rows
  /// [e0, e0 + eta.ny), which must cover [j0 - halo, j0 + n + halo) within the
  /// grid (std::logic_error otherwise). U, V are resized to n x nx and FLAGS
  /// to n * nx. Runs the rows in parallel with OpenMP; the result does not
  /// depend on the thread count.
  void compute(const Field& eta, std::size_t e0, std::size_t j0, std::size_t n, Field& u,
               Field& v, std::vector<std::uint8_t>& flags) const;

private:
  struct Row {
    double f, g, m, n_cos, beta, w_beta;
    enum Mode : std::uint8_t { f_plane, beta_plane, blend, masked_equator, pole } mode;
  };
  void compute_row(const Field& eta, std::size_t e0, std::size_t j, double* u, double* v,
                   std::uint8_t* flags) const;
  const Grid& grid_;
  CurrentsOptions options_;
  Differentiator diff_;
  std::vector<Row> rows_;
};

// ---- projected and curvilinear grids ------------------------------------------
//
// Method (CurvilinearGrid, grid.hpp): derivatives along grid rows and columns
// by the same stencil ladder (divided by the column/row coordinate's own
// stencil sum: x, y in metres for a projection, the index otherwise), then
// the node's metric B gives the east and north derivatives (per metre):
//   d(eta)/de = B.e_c d(eta)/dc + B.e_r d(eta)/dr,  d(eta)/dn likewise.
// Geostrophic balance in true east/north components ([4] ch. 10):
//   u = -(g / f) d(eta)/dn,  v = (g / f) d(eta)/de,  f = 2 Omega sin(phi_node)   (m s-1)
// Beta plane [2] in directional form: u_b = -(g / beta) d/dn (d(eta)/dn),
// v_b = (g / beta) d/dn (d(eta)/de), beta = 2 Omega cos(phi) / M; the outer
// derivative is taken of the inner one at the neighbouring nodes (nested
// first derivatives, reach 2h). Blend [3] and quality bits as on
// latitude-longitude grids, decided per node from its latitude. A node at a
// pole gets quality::masked_pole. The grid's edges are coasts (no seam).

/// East/north gradient of a field at a node (per metre), and how it was obtained.
struct Gradient {
  double e = 0.0, n = 0.0;
  Derivative::Status status = Derivative::failed;  ///< the worse of the two grid-line derivatives
};

/// First derivatives along the grid lines of a CurvilinearGrid and the
/// east/north gradient, with the stencil ladder. A band holds global rows
/// [b0, b0 + band.ny); rows outside the band or the grid, columns outside
/// the grid, and NaN cells are missing.
class CurvilinearDifferentiator {
public:
  /// ORDER 2, 4 or 6; FALLBACK false refuses any stencil but the full centred one.
  CurvilinearDifferentiator(const CurvilinearGrid& grid, int order, bool fallback);
  /// d f / d c along row j at column i (per unit of the column coordinate).
  [[nodiscard]] Derivative d_col(const Field& band, std::size_t b0, std::size_t j,
                                 std::size_t i) const;
  /// d f / d r along column i at row j (per unit of the row coordinate).
  [[nodiscard]] Derivative d_row(const Field& band, std::size_t b0, std::size_t j,
                                 std::size_t i) const;
  /// d f / de and d f / dn (per metre) at node (j, i); failed at a pole node.
  [[nodiscard]] Gradient gradient(const Field& band, std::size_t b0, std::size_t j,
                                  std::size_t i) const;
  /// Half-width of the widest stencil in rows (>= 2: one-sided needs two neighbours).
  [[nodiscard]] int reach() const { return hw_ < 2 ? 2 : hw_; }
  [[nodiscard]] const CurvilinearGrid& grid() const { return grid_; }

private:
  const CurvilinearGrid& grid_;
  int hw_;
  bool fallback_;
};

/// Geostrophic surface velocity (true east, north) on a projected or
/// curvilinear grid; same options, flags and band contract as GeostrophicKernel.
class CurvilinearGeostrophicKernel {
public:
  /// Throws UsageError for invalid options. Keeps a reference to GRID.
  CurvilinearGeostrophicKernel(const CurvilinearGrid& grid, const CurrentsOptions& options);

  /// Rows of height needed above and below the output rows: the stencil
  /// reach, doubled when a beta-plane or blended node exists (nested derivatives).
  [[nodiscard]] std::size_t halo_rows() const;

  /// As GeostrophicKernel::compute: u, v (m s-1, east and north, NaN where
  /// masked) and FLAGS for global rows [j0, j0 + n) from heights ETA (m, NaN
  /// missing) holding global rows [e0, e0 + eta.ny) that cover the halo within
  /// the grid (std::logic_error otherwise). Rows in parallel with OpenMP; the
  /// result does not depend on the thread count or the band layout.
  void compute(const Field& eta, std::size_t e0, std::size_t j0, std::size_t n, Field& u, Field& v,
               std::vector<std::uint8_t>& flags) const;

private:
  enum Mode : std::uint8_t { f_plane, beta_plane, blend, masked_equator, pole };
  void compute_row(const Field& eta, std::size_t e0, std::size_t j, double* u, double* v,
                   std::uint8_t* flags) const;
  [[nodiscard]] Mode mode_of(std::size_t j, std::size_t i) const;
  const CurvilinearGrid& grid_;
  CurrentsOptions options_;
  CurvilinearDifferentiator diff_;
  bool nested_ = false;  // some node uses the beta-plane form
};

}  // namespace seatilt
