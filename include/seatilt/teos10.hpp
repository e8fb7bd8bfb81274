// seatilt/teos10.hpp — the TEOS-10 equation of state and the conversions the
// thermal-wind computation needs.
//
// Owns: specific volume and in-situ density from Absolute Salinity,
// Conservative Temperature and sea pressure (the 75-term polynomial of [2]),
// the standard-ocean profile (SA = SSO, CT = 0 degC), Conservative
// Temperature from potential temperature, reference-composition salinity
// from Practical Salinity, and the height <-> sea-pressure relation of the
// GSW toolbox. Does not own netCDF access, grids or derivatives.
//
// Method
//  Specific volume [2] (the "75-term" expression, also gsw_specvol of [3]):
//    v(SA, CT, p) = sum_{i,j,k} v_ijk y^i x^j z^k                    (m3 kg-1)
//    x = sqrt(sfac SA + offset), y = CT / 40 degC, z = p / 1e4 dbar,
//    sfac = 1/(40 uPS) = 0.0248826675584615 (g/kg)-1, offset = 24 sfac,
//    with i + j <= 6, 5, 4, 2, 1, 0, 0 for k = 0..6 (75 coefficients).
//  rho = 1 / v                                                       (kg m-3)
//  Conservative Temperature from potential temperature (p_ref = 0):
//    CT = h0(SA, pt) / cp0, h0 the potential enthalpy polynomial of [3]
//    gsw_ct_from_pt, cp0 = 3991.86795711963 J kg-1 K-1 [1].
//  Reference-composition salinity [1] section 2.4:  SR = uPS SP,
//    uPS = 35.16504/35 g/kg. Used for Absolute Salinity when only Practical
//    Salinity is known: the Absolute Salinity Anomaly dSA = SA - SR (up to
//    ~0.025 g/kg in the North Pacific [1]) needs the gsw_SA_from_SP
//    look-up table, which seatilt does not carry.
//  Height from sea pressure ([3] gsw_z_from_p; standard ocean, no dynamic
//  height term): solve g(phi) (z - gamma z^2 / 2) + h_SSO0(p) = 0 for z,
//    g(phi) = 9.780327 (1 + (5.2792e-3 + 2.32e-5 sin2 phi) sin2 phi) m s-2,
//    gamma = 2.26e-7 m-1, h_SSO0(p) = int_0^p v(SSO, 0, p') dp' (J kg-1).
//  Sea pressure from height ([3] gsw_p_from_z): Saunders (1981) [4] first
//  guess, then one modified Newton step on the same equation.
//
// Coefficients: [2] (published in its appendix) as distributed in the
// TEOS-10 GSW-C library [3] (files gsw_internal_const.h: v000..v006;
// toolbox/gsw_ct_from_pt.c, gsw_enthalpy_sso_0.c, gsw_specvol_sso_0.c,
// gsw_z_from_p.c, gsw_p_from_z.c).
//
// References
//  [1] IOC, SCOR and IAPSO (2010), The international thermodynamic equation
//      of seawater - 2010: Calculation and use of thermodynamic properties,
//      Intergovernmental Oceanographic Commission, Manuals and Guides 56,
//      UNESCO (TEOS-10 manual). SSO = 35.16504 g/kg, uPS, cp0.
//  [2] F. Roquet, G. Madec, T. J. McDougall and P. M. Barker (2015),
//      Accurate polynomial expressions for the density and specific volume
//      of seawater using the TEOS-10 standard, Ocean Modelling 90, 29-43,
//      doi:10.1016/j.ocemod.2015.04.002 (DOI from memory).
//  [3] T. J. McDougall and P. M. Barker (2011), Getting started with TEOS-10
//      and the Gibbs Seawater (GSW) Oceanographic Toolbox, SCOR/IAPSO WG127;
//      GSW-C source code (github TEOS-10/GSW-C).
//  [4] P. M. Saunders (1981), Practical conversion of pressure to depth,
//      J. Phys. Oceanogr. 11, 573-574.
//
// Accuracy: the same polynomials as GSW, evaluated in double precision in a
// different order: agreement with python3-gsw 3.6 (Debian 12) to better
// than 1e-13 relative (tested). The 75-term fit itself reproduces the full
// TEOS-10 Gibbs-function density to ~4e-4 kg m-3 rms in the oceanographic
// range [2] (figure from memory). Inputs outside that range are evaluated
// as the polynomial gives them (no clipping).
#pragma once

namespace seatilt::teos10 {

// ---- constants [1] ----------------------------------------------------------
inline constexpr double sso = 35.16504;            ///< g/kg, Standard Ocean Reference Salinity [1]
inline constexpr double ups = sso / 35.0;          ///< g/kg, uPS: SR = uPS * SP [1] section 2.4
inline constexpr double cp0 = 3991.86795711963;    ///< J kg-1 K-1, heat capacity for CT [1]
inline constexpr double db2pa = 1.0e4;             ///< Pa per dbar
inline constexpr double gamma_z = 2.26e-7;         ///< m-1, gravity gradient term of [3] gsw_z_from_p

/// Returns the specific volume (m3 kg-1) of seawater [2] Eq. (75-term).
/// SA Absolute Salinity (g/kg, >= 0; negative values give NaN), CT
/// Conservative Temperature (degC), p sea pressure (dbar, 0 at the sea
/// surface). Valid range of the fit: the oceanographic funnel of [2]
/// (SA 0..42 g/kg, CT -2..40 degC, p 0..8000 dbar, roughly).
double specvol(double sa, double ct, double p);

/// Returns in-situ density 1 / specvol(SA, CT, p) (kg m-3).
double rho(double sa, double ct, double p);

/// Returns the specific volume of the standard ocean, specvol(SSO, 0, p)
/// (m3 kg-1), as the reduced polynomial of [3] gsw_specvol_sso_0; p in dbar.
double specvol_sso_0(double p);

/// Returns the dynamic enthalpy of the standard ocean, int_0^p specvol(SSO,
/// 0, p') dp' (J kg-1), [3] gsw_enthalpy_sso_0; p in dbar.
double enthalpy_sso_0(double p);

/// Returns Conservative Temperature (degC) from Absolute Salinity SA (g/kg,
/// >= 0; negative gives NaN) and potential temperature PT (degC, reference
/// pressure 0 dbar), [3] gsw_ct_from_pt.
double ct_from_pt(double sa, double pt);

/// Returns reference-composition salinity SR = uPS SP (g/kg) from Practical
/// Salinity SP (PSS-78, unitless) [1] section 2.4.
double sr_from_sp(double sp);

/// Returns the height z (m, positive up, <= 0 in the ocean) of sea pressure
/// P (dbar, >= 0) at latitude LAT_DEG (degrees), [3] gsw_z_from_p with zero
/// dynamic height anomaly and sea-surface geopotential (standard ocean).
double z_from_p(double p, double lat_deg);

/// Returns the sea pressure (dbar) at height Z (m, positive up; the ocean is
/// z <= 0) and latitude LAT_DEG (degrees), [3] gsw_p_from_z. Z > 5 m gives
/// NaN (GSW's own limit: above the sea surface).
double p_from_z(double z, double lat_deg);

}  // namespace seatilt::teos10
