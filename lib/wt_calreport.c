/* wt_calreport.c - the calibration report (see wt_calreport.h). */
#include "wt_calreport.h"

#include <errno.h>
#include <math.h>
#include <stddef.h>
#include <stdlib.h>
#include <string.h>

#include "wt_hadamard.h"
#include "wt_jsonparse.h"

/* Flags that count as a finding (UNSEEN is informational). */
#define FINDINGS                                                  \
	(WT_DIAG_DEAD | WT_DIAG_WEAK | WT_DIAG_SWAPPED |          \
	 WT_DIAG_DISPLACED)
#define KNOWN_FLAGS (FINDINGS | WT_DIAG_UNSEEN)

int wt_calreport_compute(const double *D, const wt_grid *lenslets,
			 const wt_grid *actuators, const wt_calib_params *p,
			 long missing, double noise_rms, wt_calreport **out,
			 wt_error *err)
{
	wt_diag_params dp;
	wt_calreport *r;
	int rc, n_pat;

	if (!D || !lenslets || !actuators || !p || !out) {
		return wt_error_set(err, -EINVAL, "report: missing argument");
	}
	r = calloc(1, sizeof(*r));
	if (!r) {
		return wt_error_set(err, -ENOMEM, "report: out of memory");
	}
	r->patterns = p->patterns;
	r->amplitude = p->amplitude;
	r->settle = p->settle;
	r->average = p->average;
	r->missing = missing;
	r->noise_rms = noise_rms;
	n_pat = p->patterns == WT_CALIB_HADAMARD
			? wt_hadamard_order(actuators->n_valid)
			: 1;
	r->matrix_noise = isfinite(noise_rms)
				  ? wt_diag_matrix_noise(noise_rms,
							 p->amplitude,
							 p->average, n_pat)
				  : NAN;
	wt_diag_params_default(&dp);
	dp.matrix_noise = isfinite(r->matrix_noise) ? r->matrix_noise : 0;
	rc = wt_diag_compute(D, lenslets, actuators, &dp, &r->diag, err);
	if (rc < 0) {
		free(r);
		return rc;
	}
	*out = r;
	return 0;
}

void wt_calreport_destroy(wt_calreport *r)
{
	if (!r) {
		return;
	}
	wt_diag_report_destroy(r->diag);
	free(r);
}

int wt_calreport_check(wt_calreport *r, wt_error *err)
{
	wt_diag_report *d = r ? r->diag : NULL;
	int k;

	if (!d || !d->act || !d->sv || d->n_act < 1 || d->n_slopes < 2 ||
	    d->n_sv != (d->n_act < d->n_slopes ? d->n_act : d->n_slopes)) {
		return wt_error_set(err, -EINVAL, "report: bad sizes");
	}
	if (r->patterns != WT_CALIB_SINGLE &&
	    r->patterns != WT_CALIB_HADAMARD) {
		return wt_error_set(err, -EINVAL, "report: unknown patterns");
	}
	if (!(r->amplitude > 0) || !isfinite(r->amplitude) || r->settle < 0 ||
	    r->average < 1 || r->missing < 0) {
		return wt_error_set(err, -EINVAL,
				    "report: bad amplitude, settle, average "
				    "or missing count");
	}
	if (!(isnan(r->noise_rms) || r->noise_rms >= 0) ||
	    !(isnan(r->matrix_noise) || r->matrix_noise >= 0) ||
	    !isfinite(d->reference_norm) || d->reference_norm < 0 ||
	    !isfinite(d->shift_x) || !isfinite(d->shift_y) ||
	    !isfinite(d->rotation_deg) || !isfinite(d->fit_rms) ||
	    !isfinite(d->sv_floor) || d->n_fit < 0 || d->n_fit > d->n_act) {
		return wt_error_set(err, -EINVAL,
				    "report: a summary value is not a valid "
				    "number");
	}
	if (d->modes < 0 || d->modes > d->n_sv) {
		return wt_error_set(err, -EINVAL,
				    "report: recommends %d modes of %d",
				    d->modes, d->n_sv);
	}
	if (memchr(d->modes_reason, '\0', sizeof(d->modes_reason)) == NULL) {
		return wt_error_set(err, -EINVAL,
				    "report: reason is not terminated");
	}
	for (k = 0; k < d->n_sv; k++) {
		if (!isfinite(d->sv[k]) || d->sv[k] < 0 ||
		    (k > 0 && d->sv[k] > d->sv[k - 1])) {
			return wt_error_set(err, -EINVAL,
					    "report: singular value %d is not "
					    "a finite, descending number",
					    k);
		}
	}
	d->n_dead = d->n_weak = d->n_swapped = d->n_displaced = 0;
	d->n_unseen = 0;
	for (k = 0; k < d->n_act; k++) {
		const wt_diag_actuator *a = &d->act[k];

		if (!isfinite(a->norm) || a->norm < 0 ||
		    !isfinite(a->expected_norm) || a->expected_norm < 0 ||
		    !(a->coverage >= 0 && a->coverage <= 1)) {
			return wt_error_set(err, -EINVAL,
					    "report: actuator %d: norm, "
					    "expected norm or coverage out of "
					    "range",
					    k);
		}
		if (a->flags & ~(unsigned int)KNOWN_FLAGS) {
			return wt_error_set(err, -EINVAL,
					    "report: actuator %d: unknown flag "
					    "bits 0x%x",
					    k, a->flags);
		}
		if ((a->flags & WT_DIAG_SWAPPED) &&
		    (a->partner < 0 || a->partner >= d->n_act ||
		     a->partner == k ||
		     d->act[a->partner].partner != k ||
		     !(d->act[a->partner].flags & WT_DIAG_SWAPPED))) {
			return wt_error_set(err, -EINVAL,
					    "report: actuator %d is swapped "
					    "with no partner naming it back",
					    k);
		}
		if (!(a->flags & WT_DIAG_SWAPPED) && a->partner != -1) {
			return wt_error_set(err, -EINVAL,
					    "report: actuator %d has a partner "
					    "but is not swapped",
					    k);
		}
		d->n_dead += !!(a->flags & WT_DIAG_DEAD);
		d->n_weak += !!(a->flags & WT_DIAG_WEAK);
		d->n_swapped += !!(a->flags & WT_DIAG_SWAPPED);
		d->n_displaced += !!(a->flags & WT_DIAG_DISPLACED);
		d->n_unseen += !!(a->flags & WT_DIAG_UNSEEN);
	}
	return 0;
}

size_t wt_calreport_json_size(const wt_calreport *r)
{
	size_t n_act = r && r->diag ? (size_t)r->diag->n_act : 0;
	size_t n_sv = r && r->diag ? (size_t)r->diag->n_sv : 0;

	return 8192 + n_act * (8 * 26 + 400) + n_sv * 26;
}

/* The evidence for flag f of actuator k, one phrase. */
static void evidence(const wt_diag_report *d, int k, unsigned int f,
		     char *buf, size_t len)
{
	const wt_diag_actuator *a = &d->act[k];
	double ratio = a->expected_norm > 0 ? a->norm / a->expected_norm : 0;

	if (f == WT_DIAG_DEAD || f == WT_DIAG_WEAK) {
		int n = snprintf(buf, len,
				 "response %.0f%% of the expected %.3g (the "
				 "median of the healthy interior actuators",
				 100 * ratio, a->expected_norm);

		if (n > 0 && (size_t)n < len && a->coverage < 0.999) {
			n += snprintf(buf + n, len - (size_t)n,
				      " x the root of the %.0f%% of its "
				      "response the sensor sees",
				      100 * a->coverage);
		}
		if (n > 0 && (size_t)n < len) {
			snprintf(buf + n, len - (size_t)n, ")");
		}
		return;
	}
	if (f == WT_DIAG_SWAPPED) {
		const wt_diag_actuator *b = &d->act[a->partner];
		double off = hypot(a->cx - a->ex, a->cy - a->ey);
		double pitch = a->offset_pitches > 0 ? off / a->offset_pitches
						     : NAN;
		double to_b = hypot(a->cx - b->ex, a->cy - b->ey) / pitch;

		snprintf(buf, len,
			 "response centred %.2f actuator pitches from its "
			 "place and %.2f from actuator %d's: wired to each "
			 "other",
			 a->offset_pitches, to_b, a->partner);
		return;
	}
	snprintf(buf, len,
		 "response centred %.2f actuator pitches from where it is "
		 "expected; no actuator fits as its partner",
		 a->offset_pitches);
}

static void flag_entry(wt_json *j, int k, const char *name, int partner,
		       const char *why)
{
	wt_json_object_begin(j);
	wt_json_key(j, "actuator");
	if (k >= 0) {
		wt_json_int(j, k);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "flag");
	wt_json_string(j, name);
	wt_json_key(j, "partner");
	if (partner >= 0) {
		wt_json_int(j, partner);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "evidence");
	wt_json_string(j, why);
	wt_json_object_end(j);
}

/* One member array of the per-actuator values. */
static void act_array(wt_json *j, const wt_diag_report *d, const char *key,
		      size_t offset)
{
	int k;

	wt_json_key(j, key);
	wt_json_array_begin(j);
	for (k = 0; k < d->n_act; k++) {
		const char *base = (const char *)&d->act[k];
		double v;

		memcpy(&v, base + offset, sizeof(v));
		wt_json_double_prec(j, v, 6);
	}
	wt_json_array_end(j);
}

void wt_calreport_json(wt_json *j, const wt_calreport *r)
{
	const wt_diag_report *d = r->diag;
	char why[512];
	unsigned int f;
	int k;

	wt_json_object_begin(j);
	wt_json_key(j, "patterns");
	wt_json_string(j, wt_calib_patterns_name(r->patterns));
	wt_json_key(j, "amplitude");
	wt_json_double(j, r->amplitude);
	wt_json_key(j, "settle");
	wt_json_int(j, r->settle);
	wt_json_key(j, "average");
	wt_json_int(j, r->average);
	wt_json_key(j, "missing");
	wt_json_int(j, r->missing);
	wt_json_key(j, "noise");
	wt_json_object_begin(j);
	wt_json_key(j, "slope_rms");
	wt_json_double_prec(j, r->noise_rms, 6);
	wt_json_key(j, "matrix_entry");
	wt_json_double_prec(j, r->matrix_noise, 6);
	wt_json_object_end(j);
	wt_json_key(j, "reference_norm");
	wt_json_double_prec(j, d->reference_norm, 6);
	wt_json_key(j, "counts");
	wt_json_object_begin(j);
	wt_json_key(j, "dead");
	wt_json_int(j, d->n_dead);
	wt_json_key(j, "weak");
	wt_json_int(j, d->n_weak);
	wt_json_key(j, "swapped");
	wt_json_int(j, d->n_swapped);
	wt_json_key(j, "displaced");
	wt_json_int(j, d->n_displaced);
	wt_json_key(j, "unseen");
	wt_json_int(j, d->n_unseen);
	wt_json_object_end(j);
	wt_json_key(j, "position_checked");
	wt_json_bool(j, d->position_checked);
	wt_json_key(j, "misregistration");
	wt_json_object_begin(j);
	wt_json_key(j, "flagged");
	wt_json_bool(j, d->misregistered);
	wt_json_key(j, "shift_x");
	wt_json_double_prec(j, d->shift_x, 4);
	wt_json_key(j, "shift_y");
	wt_json_double_prec(j, d->shift_y, 4);
	wt_json_key(j, "rotation_deg");
	wt_json_double_prec(j, d->rotation_deg, 4);
	wt_json_key(j, "fit_rms");
	wt_json_double_prec(j, d->fit_rms, 4);
	wt_json_key(j, "fitted");
	wt_json_int(j, d->n_fit);
	wt_json_object_end(j);
	wt_json_key(j, "spectrum");
	wt_json_object_begin(j);
	wt_json_key(j, "singular_values");
	wt_json_double_array(j, d->sv, (size_t)d->n_sv, 8);
	wt_json_key(j, "recommended");
	wt_json_int(j, d->modes);
	wt_json_key(j, "floor");
	if (d->sv_floor > 0) {
		wt_json_double_prec(j, d->sv_floor, 6);
	} else {
		wt_json_null(j);
	}
	wt_json_key(j, "reason");
	wt_json_string(j, d->modes_reason);
	wt_json_object_end(j);

	wt_json_key(j, "flags");
	wt_json_array_begin(j);
	for (k = 0; k < d->n_act; k++) {
		for (f = 1; f & FINDINGS; f <<= 1) {
			if (!(d->act[k].flags & f)) {
				continue;
			}
			evidence(d, k, f, why, sizeof(why));
			flag_entry(j, k, wt_diag_flag_name(f),
				   f == WT_DIAG_SWAPPED ? d->act[k].partner
							: -1,
				   why);
		}
	}
	if (d->misregistered) {
		snprintf(why, sizeof(why),
			 "the responses sit shifted by (%.2f, %.2f) lenslet "
			 "pitches and rotated by %.2f degrees from the "
			 "nominal grid (fit of %d actuators, residual %.3f "
			 "lenslet pitches)",
			 d->shift_x, d->shift_y, d->rotation_deg, d->n_fit,
			 d->fit_rms);
		flag_entry(j, -1, "misregistered", -1, why);
	}
	wt_json_array_end(j);

	wt_json_key(j, "unseen");
	wt_json_array_begin(j);
	for (k = 0; k < d->n_act; k++) {
		if (d->act[k].flags & WT_DIAG_UNSEEN) {
			wt_json_int(j, k);
		}
	}
	wt_json_array_end(j);

	wt_json_key(j, "actuators");
	wt_json_object_begin(j);
	act_array(j, d, "norm", offsetof(wt_diag_actuator, norm));
	act_array(j, d, "expected_norm",
		  offsetof(wt_diag_actuator, expected_norm));
	act_array(j, d, "centroid_x", offsetof(wt_diag_actuator, cx));
	act_array(j, d, "centroid_y", offsetof(wt_diag_actuator, cy));
	act_array(j, d, "coverage", offsetof(wt_diag_actuator, coverage));
	act_array(j, d, "offset_pitches",
		  offsetof(wt_diag_actuator, offset_pitches));
	wt_json_key(j, "flags");
	wt_json_array_begin(j);
	for (k = 0; k < d->n_act; k++) {
		wt_json_uint(j, d->act[k].flags);
	}
	wt_json_array_end(j);
	wt_json_key(j, "partner");
	wt_json_array_begin(j);
	for (k = 0; k < d->n_act; k++) {
		wt_json_int(j, d->act[k].partner);
	}
	wt_json_array_end(j);
	wt_json_object_end(j);
	wt_json_object_end(j);
}

/* --- text ------------------------------------------------------------------ */

struct doc {
	const char *js;
	const wt_jtok *t;
};

static int member(const struct doc *d, int obj, const char *path)
{
	char part[64];

	while (obj >= 0 && *path) {
		size_t n = strcspn(path, ".");

		if (n >= sizeof(part)) {
			return -1;
		}
		memcpy(part, path, n);
		part[n] = '\0';
		obj = wt_jsonp_member(d->js, d->t, obj, part);
		path += n + (path[n] == '.');
	}
	return obj;
}

/* A number member; NAN when absent or null. */
static double num(const struct doc *d, int obj, const char *path)
{
	int i = member(d, obj, path), ok = 0;
	double v;

	if (i < 0) {
		return NAN;
	}
	v = wt_jsonp_number(d->js, &d->t[i], &ok);
	return ok == 0 ? v : NAN;
}

static void text(const struct doc *d, int obj, const char *path, char *buf,
		 size_t len)
{
	int i = member(d, obj, path);

	buf[0] = '\0';
	if (i < 0 || wt_jsonp_string(d->js, &d->t[i], buf, len) < 0) {
		snprintf(buf, len, "?");
	}
}

int wt_calreport_print(FILE *out, const char *json, size_t len, wt_error *err)
{
	int max = (int)(len / 2 + 64), n, flags, sv, unseen, pc, k, i;
	wt_jtok *t = malloc(sizeof(*t) * (size_t)max);
	struct doc d = {.js = json};
	char s[1024], s2[64];
	double v;

	if (!t) {
		return wt_error_set(err, -ENOMEM, "out of memory");
	}
	d.t = t;
	n = wt_jsonp_parse(json, len, t, max, err);
	if (n < 0 || t[0].type != WT_JSON_OBJECT ||
	    (flags = member(&d, 0, "flags")) < 0 ||
	    t[flags].type != WT_JSON_ARRAY ||
	    (sv = member(&d, 0, "spectrum.singular_values")) < 0 ||
	    t[sv].type != WT_JSON_ARRAY) {
		free(t);
		return wt_error_set(err, -EINVAL,
				    "not a calibration report");
	}
	text(&d, 0, "patterns", s2, sizeof(s2));
	fprintf(out, "calibration report\n");
	fprintf(out,
		"  measured:   %s patterns, amplitude %g, settle %g, "
		"average %g frames per state\n",
		s2, num(&d, 0, "amplitude"), num(&d, 0, "settle"),
		num(&d, 0, "average"));
	v = num(&d, 0, "noise.slope_rms");
	if (isnan(v)) {
		fprintf(out, "  noise:      unknown (average 1 frame: no "
			     "repeated frames)\n");
	} else {
		fprintf(out,
			"  noise:      %.3g px per slope per frame, %.3g per "
			"matrix entry\n",
			v, num(&d, 0, "noise.matrix_entry"));
	}
	fprintf(out, "  missing:    %g measurements without a valid frame\n",
		num(&d, 0, "missing"));
	unseen = member(&d, 0, "unseen");
	pc = member(&d, 0, "position_checked");
	fprintf(out,
		"  actuators:  dead %g, weak %g, swapped %g, displaced %g; "
		"%g outside what the sensor sees%s\n",
		num(&d, 0, "counts.dead"), num(&d, 0, "counts.weak"),
		num(&d, 0, "counts.swapped"), num(&d, 0, "counts.displaced"),
		num(&d, 0, "counts.unseen"),
		pc >= 0 && !wt_jsonp_true(&t[pc])
			? " (positions not checked: sensor coarser than the "
			  "actuators)"
			: "");
	if (unseen >= 0 && t[unseen].type == WT_JSON_ARRAY &&
	    t[unseen].size > 0) {
		fprintf(out, "  unseen:    ");
		for (k = 0; k < t[unseen].size; k++) {
			i = wt_jsonp_element(t, unseen, k);
			fprintf(out, " %g", wt_jsonp_number(json, &t[i], NULL));
		}
		fputc('\n', out);
	}
	fprintf(out, "  reference:  response norm %.4g (median of the "
		     "healthy interior actuators)\n",
		num(&d, 0, "reference_norm"));
	fprintf(out,
		"  registration: shift (%.3f, %.3f) lenslet pitches, "
		"rotation %.3f deg, %g actuators fitted, residual %.3f\n",
		num(&d, 0, "misregistration.shift_x"),
		num(&d, 0, "misregistration.shift_y"),
		num(&d, 0, "misregistration.rotation_deg"),
		num(&d, 0, "misregistration.fitted"),
		num(&d, 0, "misregistration.fit_rms"));
	if (t[flags].size == 0) {
		fprintf(out, "  flags:      none\n");
	} else {
		fprintf(out, "  flags:      %d\n", t[flags].size);
	}
	for (k = 0; k < t[flags].size; k++) {
		int e = wt_jsonp_element(t, flags, k);
		double a = num(&d, e, "actuator");

		text(&d, e, "flag", s2, sizeof(s2));
		text(&d, e, "evidence", s, sizeof(s));
		if (isnan(a)) {
			fprintf(out, "    pupil: %s, %s\n", s2, s);
		} else {
			fprintf(out, "    actuator %g: %s, %s\n", a, s2, s);
		}
	}
	fprintf(out, "  spectrum:   %d singular values", t[sv].size);
	if (t[sv].size > 0) {
		int last = wt_jsonp_element(t, sv, t[sv].size - 1);

		fprintf(out, ", %.4g .. %.4g",
			wt_jsonp_number(json,
					&t[wt_jsonp_element(t, sv, 0)], NULL),
			wt_jsonp_number(json, &t[last], NULL));
	}
	fputc('\n', out);
	text(&d, 0, "spectrum.reason", s, sizeof(s));
	fprintf(out, "  recommended: %g modes: %s\n",
		num(&d, 0, "spectrum.recommended"), s);
	free(t);
	return 0;
}
