/*
 * wt_zernike.h - Zernike polynomials on the unit disk, their gradients, the
 * average-slope matrix of a lenslet grid, and least-squares modal fits.
 *
 * Ordering and normalisation follow Noll, J. Opt. Soc. Am. 66, 207 (1976):
 * the Noll index j >= 1 gives the radial order n and the azimuthal frequency
 * m, with
 *   Z_j = sqrt(n + 1) R_n^0(rho)                      when m = 0,
 *   Z_j = sqrt(2 (n + 1)) R_n^|m|(rho) cos(|m| theta)  when m > 0 (j even),
 *   Z_j = sqrt(2 (n + 1)) R_n^|m|(rho) sin(|m| theta)  when m < 0 (j odd),
 * so that every Z_j has unit RMS over the unit disk (the disk average of
 * Z_i Z_j is the Kronecker delta).  Pupil coordinates are in units of the
 * pupil radius, origin at the pupil centre, theta measured from +x towards +y.
 *
 * The radial polynomial is evaluated as R_n^m(rho) = rho^m P_k^(0,m)(2 rho^2
 * - 1), k = (n - m) / 2, with the three-term Jacobi recurrence (stable for
 * any order, no factorials), and rho^m cos(m theta), rho^m sin(m theta) as
 * the real and imaginary parts of (x + iy)^m, so values and gradients are
 * plain polynomials in x and y: exact at rho = 0 and defined outside the disk.
 *
 * Nothing here keeps state; every function is safe to call from any thread.
 */
#ifndef WT_ZERNIKE_H
#define WT_ZERNIKE_H

#include "wt_error.h"

/**
 * Radial order *n and signed azimuthal frequency *m of Noll index j (Noll
 * 1976): m > 0 is a cos term, m < 0 a sin term, m = 0 rotationally
 * symmetric.  Returns 0, or -EINVAL when j < 1 (then *n and *m are left
 * alone).  n or m may be NULL when not wanted.
 */
int wt_zernike_noll_to_nm(int j, int *n, int *m);

/**
 * Z_j at polar pupil coordinates (rho, theta), RMS-1 over the unit disk.
 * NaN when j < 1.
 */
double wt_zernike_value(int j, double rho, double theta);

/** Z_j at cartesian pupil coordinates (x, y).  NaN when j < 1. */
double wt_zernike_xy(int j, double x, double y);

/**
 * Analytic gradient of Z_j at (x, y), per pupil radius: *dzdx = dZ/dx,
 * *dzdy = dZ/dy (either pointer may be NULL).  Exact at the origin.  Both
 * are NaN when j < 1.
 */
void wt_zernike_gradient(int j, double x, double y, double *dzdx, double *dzdy);

/**
 * Average gradient of the modes over square subapertures.
 *
 * Subaperture k is the full square of half-width h centred at (cx[k], cy[k])
 * (cells at the pupil edge are not clipped to the disk: the polynomials are
 * simply continued outside it).  G is (2 n_sub) x n_modes, row-major: row k
 * holds the mean dZ/dx over square k, row n_sub + k the mean dZ/dy; column c
 * is Noll index j_first + c.  Units: per pupil radius.
 *
 * The averages are exact up to rounding: by the divergence theorem the mean
 * of dZ/dx over the square is (1 / (4 h^2)) times the integral of Z dy along
 * the right edge minus that along the left edge (likewise dZ/dy from the top
 * and bottom edges, with dx).  Along an edge Z is a polynomial of degree at
 * most n, so Gauss-Legendre quadrature with floor(n_max / 2) + 1 nodes per
 * edge integrates it exactly, n_max being the highest radial order asked
 * for.  Rounding grows like 1 / h for very small squares (a difference of
 * edge values); at lenslet sizes it stays near machine precision.
 *
 * Returns 0; -EINVAL for NULL arrays, n_sub < 1, n_modes < 1, j_first < 1,
 * a last Noll index beyond INT_MAX, h not a finite positive number, a centre
 * not finite, or a matrix too large to address; -ENOMEM when the quadrature
 * table cannot be allocated.  G is left alone on error.  Allocates (set-up
 * use, not for the real-time loop).
 */
int wt_zernike_slope_matrix(const double *cx, const double *cy, int n_sub,
			    double h, int j_first, int n_modes, double *G,
			    wt_error *err);

/**
 * Least-squares coefficients a (n_modes) minimising |G a - s|, G being
 * n_rows x n_modes row-major (for instance from wt_zernike_slope_matrix, with
 * n_rows = 2 n_sub) and s n_rows values.  G and s are not modified.
 *
 * Solved by LAPACK's dgelsd (SVD, divide and conquer) on copies.  The fit is
 * refused when G is rank deficient: when its smallest singular value is below
 * WT_ZERNIKE_FIT_RCOND times its largest (a mode without slope signature such
 * as piston, two modes the grid cannot tell apart, or too few subapertures).
 *
 * Returns 0; -EINVAL for NULL arrays, n_modes < 1, n_rows < n_modes, a size
 * too large to address, or a non-finite entry in G or s; -EDOM for a rank
 * deficient G (the message gives the rank and the singular value ratio);
 * -ENOMEM when the copies cannot be allocated; -WT_ENUMERIC when the SVD does
 * not converge.  a is left alone on error.  Allocates.
 */
int wt_zernike_fit(const double *G, int n_rows, int n_modes, const double *s,
		   double *a, wt_error *err);

/** Smallest sigma_min / sigma_max that wt_zernike_fit accepts. */
#define WT_ZERNIKE_FIT_RCOND 1e-10

#endif /* WT_ZERNIKE_H */
