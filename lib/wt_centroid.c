/* wt_centroid.c - thresholded centre of gravity per subaperture. */
#include "wt_centroid.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "wt_mvm.h"

#if (defined(__x86_64__) || defined(__i386__)) && defined(__GNUC__)
#define WT_CENTROID_HAVE_AVX2 1
#else
#define WT_CENTROID_HAVE_AVX2 0
#endif
#ifdef __SSE__
#include <immintrin.h>
#endif

typedef void (*wt_window_fn)(const uint16_t *win, size_t stride, int p,
			     float level, float *sum, float *sum_x,
			     float *sum_y);

/* Largest frame side n * p accepted. */
#define WT_CENTROID_MAX_SIDE 65535

struct wt_centroider {
	int n_valid;	   /* windows */
	int p;		   /* window side in pixels */
	size_t stride;	   /* frame row length in pixels, n * p */
	size_t *start;	   /* n_valid: offset of each window's first pixel */
	float background;  /* subtracted from every pixel */
	float threshold;   /* subtracted after the background */
	float min_flux;	   /* window flux below this is invalid */
	wt_window_fn sums; /* the kernel variant for this CPU */
};

static int wt_levels_ok(float background, float threshold, float min_flux)
{
	return isfinite(background) && isfinite(threshold) &&
	       isfinite(min_flux) && threshold >= 0.0f && min_flux >= 0.0f;
}

int wt_centroid_create(const wt_grid *lenslets, const wt_centroid_params *p,
		       wt_centroider **out, wt_error *err)
{
	wt_centroider *c;
	int k;

	if (!out) {
		return wt_error_set(err, -EINVAL,
				    "centroid: no output pointer");
	}
	*out = NULL;
	if (!lenslets || !p) {
		return wt_error_set(err, -EINVAL,
				    "centroid: no lenslet grid or parameters");
	}
	if (lenslets->n < 1 || lenslets->n_valid < 1 || !lenslets->col ||
	    !lenslets->row) {
		return wt_error_set(err, -EINVAL,
				    "centroid: the lenslet grid has no valid "
				    "subaperture");
	}
	if (p->pixels_per_lenslet < 2 ||
	    p->pixels_per_lenslet > WT_CENTROID_MAX_PIXELS) {
		return wt_error_set(
			err, -EINVAL,
			"centroid: pixels_per_lenslet %d is outside "
			"2..%d",
			p->pixels_per_lenslet, WT_CENTROID_MAX_PIXELS);
	}
	if ((long)lenslets->n * p->pixels_per_lenslet > WT_CENTROID_MAX_SIDE) {
		return wt_error_set(err, -EINVAL,
				    "centroid: frame side %d x %d pixels "
				    "exceeds %d",
				    lenslets->n, p->pixels_per_lenslet,
				    WT_CENTROID_MAX_SIDE);
	}
	if (!wt_levels_ok(p->background, p->threshold, p->min_flux)) {
		return wt_error_set(
			err, -EINVAL,
			"centroid: levels must be finite with "
			"threshold >= 0 and min_flux >= 0 "
			"(background %g, threshold %g, min_flux %g)",
			(double)p->background, (double)p->threshold,
			(double)p->min_flux);
	}
	c = calloc(1, sizeof(*c));
	if (!c) {
		return wt_error_set(err, -ENOMEM, "centroid: out of memory");
	}
	c->start = malloc((size_t)lenslets->n_valid * sizeof(*c->start));
	if (!c->start) {
		free(c);
		return wt_error_set(err, -ENOMEM,
				    "centroid: out of memory for %d windows",
				    lenslets->n_valid);
	}
	c->n_valid = lenslets->n_valid;
	c->p = p->pixels_per_lenslet;
	c->stride = (size_t)lenslets->n * (size_t)c->p;
	for (k = 0; k < c->n_valid; k++) {
		int i = lenslets->col[k], j = lenslets->row[k];

		if (i < 0 || i >= lenslets->n || j < 0 || j >= lenslets->n) {
			wt_centroid_destroy(c);
			return wt_error_set(err, -EINVAL,
					    "centroid: valid point %d at (%d, "
					    "%d) is outside the %d x %d grid",
					    k, i, j, lenslets->n, lenslets->n);
		}
		c->start[k] = (size_t)j * (size_t)c->p * c->stride +
			      (size_t)i * (size_t)c->p;
	}
	c->background = p->background;
	c->threshold = p->threshold;
	c->min_flux = p->min_flux;
	wt_centroid_use_isa(c, wt_mvm_isa_best());
	*out = c;
	return 0;
}

void wt_centroid_destroy(wt_centroider *c)
{
	if (!c) {
		return;
	}
	free(c->start);
	free(c);
}

int wt_centroid_set_levels(wt_centroider *c, float background, float threshold,
			   float min_flux)
{
	if (!c || !wt_levels_ok(background, threshold, min_flux)) {
		return -EINVAL;
	}
	c->background = background;
	c->threshold = threshold;
	c->min_flux = min_flux;
	return 0;
}

/*
 * Sums of one window in a single pass over its pixels: the background and
 * threshold subtraction, the clamp at zero and the three moments are fused,
 * each pixel is read once as uint16 and converted to float in registers,
 * and every sum is accumulated in float.
 *
 * The window is walked in column blocks of L lanes (one vector of floats).
 * Each lane keeps its own running sums (below), so the row loop is a plain
 * element-wise update (convert, subtract, clamp, two adds per row of L
 * pixels, no reduction across lanes).  After a block's rows, its lane sums
 * of w are multiplied by the column indices of the block and added
 * lane-wise into the window's sum of w * i; the lanes are reduced to three
 * scalars once per window, pairwise.
 *
 * The kernel is written twice by the macro below: with 16-byte vectors
 * (L = 4: SSE2 on x86-64, NEON elsewhere) and, on x86, with 32-byte
 * vectors (L = 8) compiled for AVX2 only and chosen at creation when the
 * CPU has it.  The AVX2 variant takes 4-wide blocks for a window side that
 * is not a multiple of 8 (12 px: 8 + 4).  Columns left over after the
 * 4-wide blocks (a side not a multiple of 4) are summed one at a time.
 */
typedef float wt_cf4 __attribute__((vector_size(16)));
typedef int32_t wt_ci4 __attribute__((vector_size(16)));
typedef uint16_t wt_cu4 __attribute__((vector_size(8)));

/*
 * One block of lanes: VF floats; LOADF reads that many uint16 pixels as
 * floats, CLAMPF(v) is v > 0 ? v : 0 lane-wise.  The row moment comes from
 * running sums: walking rows a .. b - 1, after row r w holds the lane's sum
 * of rows a..r and cum adds it up, so cum = sum over rows of
 * w(row) * (b - row), and sum w * row = b * sum w - cum (one add per row
 * instead of a multiply and two adds).  The rows are split in two bands
 * (0 .. h - 1 and h .. p - 1, h = p / 2) walked side by side, so two
 * independent chains of adds hide each other's latency (four bands
 * measured no faster).
 */

#define WT_CENTROID_BLOCK_SUMS(ATTR, NAME, VF, LOADF, CLAMPF)                  \
	ATTR static inline void NAME(const uint16_t *win, size_t stride,       \
				     int p, int c0, float level, VF *acc_w,    \
				     VF *acc_wx, VF *acc_wy)                   \
	{                                                                      \
		VF w0 = {0}, cum0 = {0}, w1 = {0}, cum1 = {0};                 \
		VF lv = {0}, col = {0}, h0 = {0}, h1 = {0};                    \
		const uint16_t *top = win + c0, *bot;                          \
		int r, q, h = p / 2;                                           \
                                                                               \
		bot = top + (size_t)h * stride;                                \
		for (q = 0; q < (int)(sizeof(VF) / sizeof(float)); q++) {      \
			lv[q] = level;                                         \
			col[q] = (float)(c0 + q);                              \
			h0[q] = (float)h;                                      \
			h1[q] = (float)p;                                      \
		}                                                              \
		for (r = 0; r < h; r++) {                                      \
			w0 += CLAMPF(LOADF(top + (size_t)r * stride) - lv);    \
			w1 += CLAMPF(LOADF(bot + (size_t)r * stride) - lv);    \
			cum0 += w0;                                            \
			cum1 += w1;                                            \
		}                                                              \
		if (p > 2 * h) {                                               \
			w1 += CLAMPF(LOADF(bot + (size_t)h * stride) - lv);    \
			cum1 += w1;                                            \
		}                                                              \
		*acc_w += w0 + w1;                                             \
		*acc_wx += (w0 + w1) * col;                                    \
		*acc_wy += (h0 * w0 - cum0) + (h1 * w1 - cum1);                \
	}

/* Pairwise sum of the lanes of a 16-byte vector. */
static inline float wt_hsum4(wt_cf4 v)
{
	return (v[0] + v[2]) + (v[1] + v[3]);
}

/* Columns c0 .. p - 1, one at a time. */
static inline void wt_column_sums(const uint16_t *win, size_t stride, int p,
				  int c0, float level, float *s, float *sx,
				  float *sy)
{
	for (; c0 < p; c0++) {
		float col_w = 0.0f, col_wy = 0.0f;
		int r;

		for (r = 0; r < p; r++) {
			float v = (float)win[(size_t)r * stride + c0] - level;

			v = v > 0.0f ? v : 0.0f;
			col_w += v;
			col_wy += v * (float)r;
		}
		*s += col_w;
		*sx += col_w * (float)c0;
		*sy += col_wy;
	}
}

static inline wt_cf4 wt_load4(const uint16_t *px)
{
#ifdef __SSE2__
	/* gcc 12 converts a vector of uint16 lane by lane on SSE2 */
	__m128i u = _mm_loadl_epi64((const __m128i *)(const void *)px);

	u = _mm_unpacklo_epi16(u, _mm_setzero_si128());
	return (wt_cf4)_mm_cvtepi32_ps(u);
#else
	wt_cu4 u;

	memcpy(&u, px, sizeof(u));
	return __builtin_convertvector(u, wt_cf4);
#endif
}

static inline wt_cf4 wt_clamp4(wt_cf4 v)
{
#ifdef __SSE__
	/* maxps(v, 0) returns v when v > 0 and 0 otherwise, as below */
	return (wt_cf4)_mm_max_ps((__m128)v, _mm_setzero_ps());
#else
	wt_cf4 zero = {0};
	wt_ci4 m = v > zero;

	return (wt_cf4)((wt_ci4)v & m);
#endif
}

WT_CENTROID_BLOCK_SUMS(, wt_block4, wt_cf4, wt_load4, wt_clamp4)

static void wt_window_sums4(const uint16_t *win, size_t stride, int p,
			    float level, float *sum, float *sum_x, float *sum_y)
{
	wt_cf4 w = {0}, wx = {0}, wy = {0};
	float s, sx, sy;
	int c0;

	for (c0 = 0; c0 + 4 <= p; c0 += 4) {
		wt_block4(win, stride, p, c0, level, &w, &wx, &wy);
	}
	s = wt_hsum4(w);
	sx = wt_hsum4(wx);
	sy = wt_hsum4(wy);
	wt_column_sums(win, stride, p, c0, level, &s, &sx, &sy);
	*sum = s;
	*sum_x = sx;
	*sum_y = sy;
}

#if WT_CENTROID_HAVE_AVX2
#define WT_CAVX2 __attribute__((target("avx2")))
typedef float wt_cf8 __attribute__((vector_size(32)));

/* gcc 12 widens a vector of eight uint16 in two halves; the intrinsic is
 * one vpmovzxwd from memory. */
WT_CAVX2 static inline wt_cf8 wt_load8(const uint16_t *px)
{
	__m128i u = _mm_loadu_si128((const __m128i *)(const void *)px);

	return (wt_cf8)_mm256_cvtepi32_ps(_mm256_cvtepu16_epi32(u));
}

WT_CAVX2 static inline wt_cf4 wt_load4_avx2(const uint16_t *px)
{
	__m128i u = _mm_loadl_epi64((const __m128i *)(const void *)px);

	return (wt_cf4)_mm_cvtepi32_ps(_mm_cvtepu16_epi32(u));
}

WT_CAVX2 static inline wt_cf8 wt_clamp8(wt_cf8 v)
{
	return (wt_cf8)_mm256_max_ps((__m256)v, _mm256_setzero_ps());
}

WT_CAVX2 static inline wt_cf4 wt_clamp4_avx2(wt_cf4 v)
{
	return (wt_cf4)_mm_max_ps((__m128)v, _mm_setzero_ps());
}

WT_CENTROID_BLOCK_SUMS(WT_CAVX2, wt_block8, wt_cf8, wt_load8, wt_clamp8)
WT_CENTROID_BLOCK_SUMS(WT_CAVX2, wt_block4_avx2, wt_cf4, wt_load4_avx2,
		       wt_clamp4_avx2)

WT_CAVX2 static void wt_window_sums8(const uint16_t *win, size_t stride, int p,
				     float level, float *sum, float *sum_x,
				     float *sum_y)
{
	wt_cf8 w8 = {0}, wx8 = {0}, wy8 = {0};
	wt_cf4 w, wx, wy;
	float s, sx, sy;
	int c0, q;

	for (c0 = 0; c0 + 8 <= p; c0 += 8) {
		wt_block8(win, stride, p, c0, level, &w8, &wx8, &wy8);
	}
	for (q = 0; q < 4; q++) {
		w[q] = w8[q] + w8[q + 4];
		wx[q] = wx8[q] + wx8[q + 4];
		wy[q] = wy8[q] + wy8[q + 4];
	}
	if (c0 + 4 <= p) {
		wt_block4_avx2(win, stride, p, c0, level, &w, &wx, &wy);
		c0 += 4;
	}
	s = wt_hsum4(w);
	sx = wt_hsum4(wx);
	sy = wt_hsum4(wy);
	wt_column_sums(win, stride, p, c0, level, &s, &sx, &sy);
	*sum = s;
	*sum_x = sx;
	*sum_y = sy;
}
#endif

int wt_centroid_use_isa(wt_centroider *c, enum wt_mvm_isa isa)
{
	if (!c || !wt_mvm_isa_supported(isa)) {
		return -ENOTSUP;
	}
	c->sums = wt_window_sums4;
#if WT_CENTROID_HAVE_AVX2
	if (isa == WT_MVM_ISA_AVX2) {
		c->sums = wt_window_sums8;
	}
#endif
	return 0;
}

int wt_centroid_frame(const wt_centroider *c, const uint16_t *frame,
		      float *slopes, float *flux, uint8_t *valid)
{
	float level, centre;
	int k, n, n_invalid = 0;

	if (!c || !frame || !slopes) {
		return -EINVAL;
	}
	n = c->n_valid;
	level = c->background + c->threshold;
	centre = 0.5f * (float)(c->p - 1);
	for (k = 0; k < n; k++) {
		float s, sx, sy;
		int ok;

		c->sums(frame + c->start[k], c->stride, c->p, level, &s, &sx,
			&sy);
		ok = s > 0.0f && s >= c->min_flux;
		if (ok) {
			slopes[k] = sx / s - centre;
			slopes[n + k] = sy / s - centre;
		} else {
			slopes[k] = 0.0f;
			slopes[n + k] = 0.0f;
			n_invalid++;
		}
		if (flux) {
			flux[k] = s;
		}
		if (valid) {
			valid[k] = (uint8_t)ok;
		}
	}
	return n_invalid;
}

int wt_centroid_saturated(const wt_centroider *c, const uint16_t *frame,
			  uint16_t full_scale, uint8_t *valid)
{
	int k, r, q, n = 0;

	if (!c || !frame || !valid) {
		return -EINVAL;
	}
	for (k = 0; k < c->n_valid; k++) {
		const uint16_t *win = frame + c->start[k];
		int hit = 0;

		for (r = 0; r < c->p && !hit; r++) {
			const uint16_t *px = win + (size_t)r * c->stride;

			for (q = 0; q < c->p; q++) {
				hit |= px[q] >= full_scale;
			}
		}
		if (hit) {
			valid[k] = 0;
			n++;
		}
	}
	return n;
}
