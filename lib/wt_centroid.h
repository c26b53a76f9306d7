/*
 * wt_centroid.h - thresholded centre of gravity per subaperture.
 *
 * The per-frame hot path: a camera frame of (n * p) x (n * p) uint16 pixels
 * (n lenslets across, p pixels per lenslet, row-major, column = x) is cut
 * into one p x p window per valid lenslet, and each window gives an x and y
 * slope (spot displacement in pixels) and a flux.
 *
 * Per window, with I the pixel value, B the background and T the threshold:
 *
 *   w(i, j) = max(I(i, j) - B - T, 0)
 *   flux    = sum w
 *   cx      = sum(w * i) / flux - (p - 1) / 2,  cy likewise with j
 *
 * where i, j are the pixel indices inside the window (pixel k's centre is at
 * k), so a spot centred in its window (on the lenslet axis) reads 0.  A
 * window with flux < min_flux, or flux <= 0, is invalid this frame: its
 * slopes are 0 and its valid byte 0.
 *
 * Known behaviour of this estimator (common practice; thresholding is
 * discussed by Thomas et al. 2006, MNRAS 371, 323), each checked by
 * tests/test_centroid.c:
 *
 * - A symmetric spot, pixel-integrated and wholly inside its window, is
 *   measured without bias when B equals the true background and T = 0.
 * - A uniform background b left unsubtracted (B too low by b, T = 0) adds
 *   F_bg = b * p * p of flux centred on the window, so the measured
 *   displacement is the true one times F_spot / (F_spot + F_bg): the spot
 *   appears pulled toward the window centre, and the pull grows as the spot
 *   gets fainter.
 * - A threshold at or above that leftover background (T >= b) zeroes every
 *   background-only pixel and removes the pull.  A threshold above the
 *   background cuts into the spot; for a spot wholly inside the window that
 *   costs little (the spot stays symmetric; sampling the cut spot leaves a
 *   small error that repeats every pixel of displacement, up to about
 *   0.005 px for a 1.2 px sigma spot cut at 5% of its peak, by direct sums
 *   over rendered spots) but it lowers the flux and so the signal-to-noise
 *   ratio.
 * - A spot near the edge of its window, so that the window truncates it on
 *   one side, is measured with a bias toward the window centre, because the
 *   truncated side is missing.  The bias grows quickly as the spot nears
 *   the edge and vanishes once the part of the spot above the threshold
 *   fits inside the window; a higher threshold makes that part smaller, so
 *   the biased zone is narrower.
 *
 * The centroider copies what it needs from the grid: the grid may be
 * destroyed after wt_centroid_create().  wt_centroid_frame() does not
 * allocate, does not write to the centroider, and may run in one thread
 * while another thread only reads; wt_centroid_set_levels() must not run
 * at the same time as wt_centroid_frame() on the same centroider.
 */
#ifndef WT_CENTROID_H
#define WT_CENTROID_H

#include <stdint.h>

#include "wt_error.h"
#include "wt_geometry.h"
#include "wt_mvm.h"

/** Largest pixels_per_lenslet accepted. */
#define WT_CENTROID_MAX_PIXELS 1024

/** Window size and levels. */
typedef struct wt_centroid_params {
	/** window side p (2 .. WT_CENTROID_MAX_PIXELS); the window of lenslet
	 * (i, j) starts at pixel (i*p, j*p) */
	int pixels_per_lenslet;
	/** subtracted from every pixel (finite) */
	float background;
	/** then subtracted again; negative results count zero (finite, >= 0) */
	float threshold;
	/** window sum (after both) below this: invalid, slopes 0 (finite,
	 * >= 0) */
	float min_flux;
} wt_centroid_params;

/** Precomputed windows of one lenslet grid, and the current levels. */
typedef struct wt_centroider wt_centroider;

/**
 * Make a centroider for the valid lenslets of a grid with the given window
 * size and levels.  Refuses (-EINVAL, message in *err) a NULL grid, params
 * or out, a grid without valid points, a window size outside
 * 2..WT_CENTROID_MAX_PIXELS, a frame side n * p above 65535, and levels
 * refused by wt_centroid_set_levels(); -ENOMEM when allocation fails.
 */
int wt_centroid_create(const wt_grid *lenslets, const wt_centroid_params *p,
		       wt_centroider **out, wt_error *err);

/** Free a centroider (NULL is allowed). */
void wt_centroid_destroy(wt_centroider *c);

/**
 * Change the levels (used from the next frame on).  Returns 0, or -EINVAL
 * and leaves the levels unchanged when c is NULL, a level is not finite, or
 * threshold or min_flux is negative.
 */
int wt_centroid_set_levels(wt_centroider *c, float background, float threshold,
			   float min_flux);

/**
 * Choose the kernel variant (the ISA names of wt_mvm.h: 16-byte vectors,
 * or 32-byte AVX2 vectors on x86).  wt_centroid_create() picks the best
 * one the CPU has; this is for tests and benchmarks.  The variants differ
 * only in the order their float sums are added.  Returns 0, or -ENOTSUP
 * for a variant this CPU or build lacks (or a NULL c).  Not at the same
 * time as wt_centroid_frame() on the same centroider.
 */
int wt_centroid_use_isa(wt_centroider *c, enum wt_mvm_isa isa);

/**
 * Centroid one frame.  frame is (n*p) x (n*p) uint16, row-major.  slopes
 * receives 2N floats in pixels (x slopes of the N valid lenslets in the
 * grid's valid order, then their y slopes), measured from the window centre
 * (p - 1) / 2 in pixel-index coordinates; flux receives N floats (the
 * window sum after background and threshold, also for invalid windows);
 * valid receives N bytes, 1 or 0.  flux and valid may be NULL.
 *
 * Returns the number of invalid subapertures (>= 0), or -EINVAL when c,
 * frame or slopes is NULL.  No allocation; sums are accumulated in float.
 */
int wt_centroid_frame(const wt_centroider *c, const uint16_t *frame,
		      float *slopes, float *flux, uint8_t *valid);

/**
 * Saturated subapertures: mark invalid (valid[k] = 0) every window holding
 * a raw pixel at or above full_scale (the camera's largest count, before
 * background and threshold), since a clipped spot's centroid is biased
 * toward the clipped plateau's centre.  Returns how many windows hold such
 * a pixel (also those already invalid), or -EINVAL when c, frame or valid
 * is NULL.  Stops reading a window after the row of its first saturated
 * pixel; no allocation.
 */
int wt_centroid_saturated(const wt_centroider *c, const uint16_t *frame,
			  uint16_t full_scale, uint8_t *valid);

#endif /* WT_CENTROID_H */
