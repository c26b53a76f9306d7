/*
 * wt_hadamard.h - Hadamard poke patterns for measuring an interaction matrix.
 *
 * Instead of poking one actuator at a time, every frame pokes all n
 * actuators at once with +a or -a, the signs of one row of a Hadamard
 * matrix (Kasper et al. 2004, JOSA A 21, 1004).  Each actuator is then
 * seen in every frame, so for the same number of frames each column of the
 * interaction matrix averages n times more measurements (a weighing design:
 * Hotelling 1944, Ann. Math. Stat. 15, 297; Harwit & Sloane 1979, Hadamard
 * Transform Optics).
 *
 * The matrix.  Sylvester's construction (Sylvester 1867, Phil. Mag. 34,
 * 461): H_1 = [1], H_2m = [H_m H_m; H_m -H_m].  Its entries have the closed
 * form H[p][k] = (-1)^popcount(p & k) (p, k counted from 0), it is
 * symmetric, and H H^T = H^T H = N I (Hadamard 1893).  For n actuators the
 * order N is the smallest power of two >= n; actuator k takes column k,
 * columns n .. N-1 are not used, and the N rows are the N patterns.
 *
 * Measuring.  Pattern p commands c_p = a h_p with h_p = (H[p][0], ...,
 * H[p][n-1])^T.  Push-pull, as for single pokes: average the slopes with
 * flat + c_p and with flat - c_p, and form m_p = (s+ - s-) / (2 a).  For a
 * linear sensor s = s0 + D c this is m_p = D h_p exactly.
 *
 * Decoding.  Collect the m_p as the columns of M (n_slopes x N), so that
 * M = D H_n^T, where H_n is the N x n matrix of the first n columns of H.
 * The columns of H are orthogonal with squared norm N (H^T H = N I), so
 * H_n^T H_n = N I_n and
 *
 *     M H_n = D H_n^T H_n = N D,   hence   D = M H_n / N.
 *
 * Row i of M H_n is the Walsh-Hadamard transform of row i of M (H is
 * symmetric), computed here with the fast butterfly in N log2 N additions.
 *
 * Noise.  Let every slope of every frame carry independent noise of
 * variance s^2, and spend F frames in total on averaging (settle frames
 * aside).
 *  - One actuator at a time: 2n states (n actuators, two signs), F / (2n)
 *    frames each.  A state's mean has variance s^2 / (F / (2n)); the
 *    difference of two has twice that; dividing by 2a gives
 *        var(D_ij) = 2 s^2 (2n / F) / (4 a^2) = n s^2 / (a^2 F).
 *  - Hadamard: 2N states, F / (2N) frames each, so likewise
 *        var(m_ip) = N s^2 / (a^2 F),
 *    independent across p.  D_ij = (1/N) sum_p M_ip H[p][j] sums N of them
 *    with weights +-1/N:
 *        var(D_ij) = N var(m_ip) / N^2 = s^2 / (a^2 F).
 * The variance times the frames spent is n s^2 / a^2 for single pokes and
 * s^2 / a^2 for Hadamard patterns: smaller by the factor n, whether or not
 * n is a power of two (N cancels).  What a non-power of two costs is the
 * granularity: a Hadamard run needs at least 2N frames, one at a time 2n.
 * At equal frames per state instead (same `average` setting), Hadamard's
 * variance is N times smaller and it takes N / n times as many frames.
 * (A count that credits the decoding with averaging only n measurements,
 * one per actuator, instead of all N patterns would predict n^2 / N; every
 * one of the N patterns enters each decoded entry, so the factor is n.)
 * The errors of different entries stay uncorrelated because the columns of
 * H are orthogonal.
 *
 * Pattern 0 is all +a (every actuator pushed together): check that the
 * mirror's limits allow flat +- a on every actuator at once.
 *
 * Pure computation: no allocation, no I/O, no state.
 */
#ifndef WT_HADAMARD_H
#define WT_HADAMARD_H

/** Most actuators accepted (the order then stays below 2^21). */
#define WT_HADAMARD_MAX_ACT (1 << 20)

/**
 * Order N of the Sylvester matrix used for n_act actuators: the smallest
 * power of two >= n_act, which is also the number of patterns.  -EINVAL
 * when n_act is outside [1, WT_HADAMARD_MAX_ACT].
 */
int wt_hadamard_order(int n_act);

/**
 * Entry H[p][k] = (-1)^popcount(p & k) of every Sylvester matrix whose
 * order exceeds p and k: +1 or -1.  0 when p or k is negative.
 */
int wt_hadamard_sign(int p, int k);

/**
 * Pattern p (0 <= p < wt_hadamard_order(n_act)) for n_act actuators:
 * cmd[k] = amplitude * H[p][k] for k < n_act.  The caller adds the flat and
 * applies it with both signs.  -EINVAL for a bad n_act or p, a NULL cmd or
 * a non-finite amplitude.
 */
int wt_hadamard_pattern(int n_act, int p, float amplitude, float *cmd);

/**
 * Decode D = M H_n / N.  M is n_slopes x N row-major, column p being the
 * push-pull measurement (s+ - s-) / (2 a) of pattern p (M[i * N + p]); D
 * is n_slopes x n_act row-major (D[i * n_act + k]).  work holds N doubles
 * of scratch.  M and D must not overlap.  -EINVAL for NULL pointers or bad
 * sizes.  No allocation.
 */
int wt_hadamard_decode(const double *M, int n_slopes, int n_act, double *D,
		       double *work);

#endif /* WT_HADAMARD_H */
