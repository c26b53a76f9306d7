/*
 * sim_optics.h - pupil optics of the simulator: complex pupil field, Strehl
 * ratio, point-spread function, and the Shack-Hartmann spot images.
 *
 * Units: phase in radians at the sensing wavelength (multiply a path
 * difference in micrometres by 2 pi / wavelength_um); every length in
 * micrometres; spot positions and slopes on the detector in pixels.
 *
 * Sample grids follow sim_pupil.h: an n x n map, column a grows with x, row
 * b with y, index b * n + a.  For the spot renderer the map covers the whole
 * lenslet grid with `phase_samples` samples across each lenslet, so sample
 * (a, b) has its centre at ((a + 0.5) / phase_samples,
 * (b + 0.5) / phase_samples) lenslet pitches from the grid's corner, and
 * lenslet (i, j) covers columns i * phase_samples ... (i + 1) *
 * phase_samples - 1 (the same grid as sim_pupil with samples =
 * phase_samples).
 *
 * Detector layout (as lib/wt_centroid.h expects): the frame has
 * n_lenslets * pixels_per_lenslet pixels across; lenslet (i, j) looks at the
 * window starting at pixel (i * p, j * p), its optical axis is the window
 * centre (pixel-index coordinate (p - 1) / 2), so the lenslet pitch is p
 * detector pixels.  A wavefront W (micrometres) with mean gradient dW/dx over
 * a lenslet moves that lenslet's spot by +focal_um * dW/dx micrometres along
 * +x (first-moment theorem of Fraunhofer diffraction), i.e. by
 *   focal_um * wavelength_um / (2 pi pixel_um) * dphi/dx   pixels,
 * dphi/dx in radians per micrometre.  Positive slope, positive shift.
 */
#ifndef SIM_OPTICS_H
#define SIM_OPTICS_H

#include <stddef.h>

#include "wt_error.h"

/* ---- pupil field, Strehl ratio, PSF --------------------------------- */

/**
 * Amplitude mask of an annular pupil inscribed in an n x n grid (sample
 * centres at (a + 0.5 - n / 2) * 2 / n in pupil radii, as sim_pupil): 1 when
 * obscuration <= r <= 1, else 0.  amp has n * n entries.  Returns the number
 * of samples inside, or -EINVAL.
 */
int sim_optics_disk(int n, double obscuration, double *amp);

/**
 * Complex pupil field amp * exp(i phase) for n_points samples; field is laid
 * out as fftw_complex ([k][0] real, [k][1] imaginary).  amp NULL means 1.
 */
void sim_optics_field(size_t n_points, const double *phase, const double *amp,
		      double (*field)[2]);

/**
 * Strehl ratio at the nominal focus, S = |sum a exp(i phi)|^2 / (sum a)^2
 * (for a binary mask: |<exp(i phi)>|^2 over the pupil).  It is the on-axis
 * PSF value relative to the unaberrated one (Born & Wolf 9.1).  amp NULL
 * means 1 everywhere; returns NaN when the amplitudes sum to zero.
 */
double sim_optics_strehl(size_t n_points, const double *phase,
			 const double *amp);

/**
 * RMS of the phase over the pupil after removing its (amp-weighted) mean:
 * sqrt(sum a (phi - <phi>)^2 / sum a).  amp NULL means 1.
 */
double sim_optics_rms(size_t n_points, const double *phase, const double *amp);

/** Marechal's approximation exp(-sigma^2) of the Strehl ratio. */
double sim_optics_marechal(double rms_rad);

/** Far-field intensity of a pupil by a zero-padded FFT (plans made once). */
typedef struct sim_psf sim_psf;

/**
 * Pupils of n_pupil x n_pupil samples in an n_fft x n_fft transform; refuses
 * (-EINVAL) n_pupil < 2 and n_fft < 2 * n_pupil (less than Nyquist padding
 * for the intensity).  Allocates and plans (FFTW_ESTIMATE): set-up use.
 */
int sim_psf_create(int n_pupil, int n_fft, sim_psf **out, wt_error *err);
void sim_psf_destroy(sim_psf *p);

/**
 * PSF of the field amp * exp(i phase) (both n_pupil^2, amp NULL = 1) into
 * psf (n_fft^2, may be NULL), centred: the optical axis is at pixel
 * (n_fft / 2, n_fft / 2), one pixel is wavelength / (n_fft * sample
 * spacing) radians of angle.  Normalised to the peak of the unaberrated PSF
 * of the same amplitude, so the axis value is the Strehl ratio; *strehl
 * (may be NULL) receives that value, *peak (may be NULL) the largest value
 * anywhere.  Returns 0, or -EDOM when the amplitudes sum to zero.
 */
int sim_psf_compute(sim_psf *p, const double *phase, const double *amp,
		    double *psf, double *strehl, double *peak);

/** Transform size of p. */
int sim_psf_size(const sim_psf *p);

/* ---- Shack-Hartmann spots -------------------------------------------- */

/** How spots are drawn. */
enum sim_spot_model {
	/** |FFT|^2 of each lenslet's field, sampled to detector pixels. */
	SIM_SPOT_DIFFRACTION = 0,
	/**
	 * Gaussian at f x mean slope (sim_spots_mean_slopes) with the FWHM of
	 * the square lenslet's sinc^2 core, 0.8859 wavelength f / pitch
	 * (sigma 0.3762 wavelength f / pitch), integrated over each pixel
	 * with erf.
	 */
	SIM_SPOT_GAUSSIAN = 1,
};

/** Sensor description (lengths in micrometres). */
typedef struct sim_spot_params {
	enum sim_spot_model model;
	int n_lenslets;		/**< lenslet grid is n_lenslets across */
	int pixels_per_lenslet; /**< p; must equal pitch_um / pixel_um */
	int phase_samples;	/**< input map samples across one lenslet */
	double pitch_um;	/**< lenslet pitch */
	double focal_um;	/**< lenslet focal length */
	double wavelength_um;	/**< sensing wavelength */
	double pixel_um;	/**< detector pixel pitch */
	/**
	 * Diffraction model: FFT samples per detector pixel (q, integer);
	 * 0 = the least q that samples the intensity at Nyquist
	 * (q >= 2 pixel_um * pitch_um / (wavelength_um * focal_um)).
	 */
	int oversample;
	/**
	 * Diffraction model: width of the FFT plane in lenslet windows (>= 1;
	 * 0 = 2).  Light is added to the frame wherever it falls inside that
	 * plane, neighbouring windows included (cross-talk); the plane is
	 * periodic, so light beyond it wraps back.
	 */
	int fov_windows;
	/**
	 * Diffraction model: least number of FFT pupil samples across one
	 * lenslet (0 = max(16, phase_samples)).
	 */
	int min_pupil_samples;
} sim_spot_params;

/**
 * Layout the renderer chose (diffraction model; zeros for the Gaussian).
 *
 * Scale: one FFT sample is exactly pixel_um / oversample on the detector.
 * The lenslet field is resampled (bilinear phase and amplitude) onto an FFT
 * pupil grid of spacing dx_um = wavelength_um * focal_um / (n_fft *
 * pixel_um / oversample), so that the transform's angular sample lands on
 * 1 / oversample pixel; n_fft is the least size (a power of two when that
 * costs at most 1.5x, else 2^a 3^b 5^c) that covers fov_windows windows and
 * min_pupil_samples samples across the lenslet.  The lenslet's edges then
 * fall between FFT pupil samples, which carry their fractional overlap with
 * the lenslet square as an amplitude weight.  q x q FFT samples are summed
 * into one pixel (a half-sample tilt is applied when needed so that sample
 * cells tile the pixels exactly).
 *
 * Known departures from the continuous optics, all shrinking as
 * pupil_samples grows (0.4 % at 120 samples, 2 % at 24):
 * - the FFT plane is periodic, so the sinc^2 wings of the lenslet's sharp
 *   edge fold back into it and pull each spot's centre of gravity towards
 *   the lenslet axis by up to 1 / (2 pupil_samples) of its shift;
 * - the light is normalised to the squared weights (so `photons` is
 *   exact), which makes the core up to (1 + 1 / (2 pupil_samples))^2
 *   brighter than sinc^2 when the edge samples are fractional.
 */
typedef struct sim_spot_layout {
	int n_fft;	/**< FFT size across */
	int oversample; /**< FFT samples per pixel */
	int n_sub;	/**< FFT pupil samples across (covering the lenslet) */
	double dx_um;	/**< FFT pupil sample spacing */
	double pupil_samples; /**< pitch_um / dx_um (not an integer) */
	int batch;	      /**< lenslets per fftwf_plan_many_dft execution */
} sim_spot_layout;

/**
 * The renderer (owns its FFTW plans and buffers; one thread at a time).
 * Creating and destroying it plans with FFTW, which is not thread-safe:
 * do not create or destroy renderers, PSFs or screens concurrently.
 */
typedef struct sim_spots sim_spots;

/**
 * Renderer for the lenslets (col[k], row[k]), k < n_render (e.g. a wt_grid's
 * col, row and n_valid; col and row NULL = all n x n cells in row-major
 * order).  The lists are copied.  Returns 0, -EINVAL for bad parameters
 * (message says which), -ENOMEM.  Plans FFTW_ESTIMATE: set-up use only.
 */
int sim_spots_create(const sim_spot_params *p, const int *col, const int *row,
		     int n_render, sim_spots **out, wt_error *err);
void sim_spots_destroy(sim_spots *s);

/** Layout chosen at creation. */
void sim_spots_layout(const sim_spots *s, sim_spot_layout *out);

/**
 * Draw the spots.  phase and amp are maps of (n_lenslets * phase_samples)^2
 * samples (amp NULL = 1 everywhere, e.g. 0 outside the pupil); frame is
 * (n_lenslets * pixels_per_lenslet)^2 floats, overwritten (zeroed, then each
 * lenslet's light is added).  A fully illuminated lenslet of amplitude 1
 * carries `photons` in total, a partial one photons times its mean squared
 * amplitude (the FFT plane may lose or wrap a little at its border).  No
 * allocation.  Returns 0 or -EINVAL (NULL pointers).
 */
int sim_spots_render(sim_spots *s, const double *phase, const double *amp,
		     double photons, float *frame);

/**
 * The geometric truth: for each rendered lenslet k, the intensity-weighted
 * mean phase gradient over the lenslet (the first-moment position of its
 * spot), in detector pixels from the window centre; slopes has 2 n_render
 * entries, x of lenslet k at [k], y at [n_render + k] (the order of col/row).
 * The gradient is the central difference of the bilinear phase over one
 * map sample, so it is exact to O(sample^2) for smooth phase.  The
 * Gaussian model draws its spots exactly here.
 * flux (n_render, may be NULL) receives the light each lenslet collects
 * (photons times mean squared amplitude, before any FFT-plane loss).
 * Lenslets with no light get 0.  Same resampling as the renderers.
 */
int sim_spots_mean_slopes(sim_spots *s, const double *phase, const double *amp,
			  double photons, float *slopes, float *flux);

/**
 * Spot shift in pixels per radian of phase difference across one lenslet
 * pitch: focal_um * wavelength_um / (2 pi pixel_um * pitch_um).
 */
double sim_spots_pixels_per_radian(const sim_spot_params *p);

#endif /* SIM_OPTICS_H */
