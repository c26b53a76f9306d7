/* wt_hadamard.c - Hadamard poke patterns (see wt_hadamard.h). */
#include "wt_hadamard.h"

#include <errno.h>
#include <math.h>
#include <stddef.h>

int wt_hadamard_order(int n_act)
{
	int order = 1;

	if (n_act < 1 || n_act > WT_HADAMARD_MAX_ACT) {
		return -EINVAL;
	}
	while (order < n_act) {
		order <<= 1;
	}
	return order;
}

int wt_hadamard_sign(int p, int k)
{
	unsigned int bits;
	int parity = 0;

	if (p < 0 || k < 0) {
		return 0;
	}
	/* Sylvester's recursion doubles the order by one bit of the row and
	 * column index each time, and the lower-right block flips the sign:
	 * the sign is the parity of the bits p and k share. */
	for (bits = (unsigned int)p & (unsigned int)k; bits; bits &= bits - 1) {
		parity ^= 1;
	}
	return parity ? -1 : 1;
}

int wt_hadamard_pattern(int n_act, int p, float amplitude, float *cmd)
{
	int order = wt_hadamard_order(n_act);
	int k;

	if (order < 0 || !cmd || p < 0 || p >= order || !isfinite(amplitude)) {
		return -EINVAL;
	}
	for (k = 0; k < n_act; k++) {
		cmd[k] = wt_hadamard_sign(p, k) > 0 ? amplitude : -amplitude;
	}
	return 0;
}

/* In-place fast Walsh-Hadamard transform in Sylvester (natural) order:
 * x[k] <- sum_p x[p] H[p][k].  Each pass applies one factor [1 1; 1 -1] of
 * the Kronecker product H_N = H_2 (x) ... (x) H_2. */
static void fwht(double *x, int order)
{
	int len, i, j;

	for (len = 1; len < order; len <<= 1) {
		for (i = 0; i < order; i += 2 * len) {
			for (j = i; j < i + len; j++) {
				double a = x[j];
				double b = x[j + len];

				x[j] = a + b;
				x[j + len] = a - b;
			}
		}
	}
}

int wt_hadamard_decode(const double *M, int n_slopes, int n_act, double *D,
		       double *work)
{
	int order = wt_hadamard_order(n_act);
	double scale;
	int i, k;

	if (order < 0 || !M || !D || !work || n_slopes < 1) {
		return -EINVAL;
	}
	scale = 1.0 / order;
	for (i = 0; i < n_slopes; i++) {
		const double *row = M + (size_t)i * order;

		for (k = 0; k < order; k++) {
			work[k] = row[k];
		}
		fwht(work, order);
		for (k = 0; k < n_act; k++) {
			D[(size_t)i * n_act + k] = work[k] * scale;
		}
	}
	return 0;
}
