/*
 * sim_record.h - record simulated frames to HDF5 without a daemon.
 *
 * The file (HDF5 1.10, every dataset little-endian):
 *   /frames   uint16 [N][H][W]  the camera frames, chunked one frame a chunk
 *   /truth    compound [N]      per frame: frame (u64), time_s, rms_nm,
 *                               rms_tt_removed_nm, strehl (f64),
 *                               saturated, clipped (u32)
 *   /command  float32 [A]       the command held for every frame (as
 *                               applied, after clipping)
 *   attributes of /: "program" ("wavetrim-sim"), "config" (the whole
 *   configuration as INI text), "frames" (N), "wavelength_nm".
 * All HDF5 calls happen in the calling thread.
 */
#ifndef SIM_RECORD_H
#define SIM_RECORD_H

#include <signal.h>
#include <stdint.h>

#include "sim_world.h"
#include "wt_config.h"
#include "wt_error.h"

/**
 * Read a command file: n numbers (normalised stroke) separated by blanks,
 * commas or newlines; '#' starts a comment that runs to the end of the
 * line.  Refuses (-EINVAL) a file with fewer or more numbers, or anything
 * that is not a finite number; -errno when it cannot be read.
 */
int sim_record_read_command(const char *path, float *cmd, int n, wt_error *err);

/**
 * Apply cmd (NULL = flat), expose n_frames frames of w and write them with
 * their truth to path (created or truncated).  cfg is stored as text.  Stops
 * early, keeping what it wrote, when *stop becomes non-zero (stop may be
 * NULL).  Returns 0 or a negative code with the message in *err.
 */
int sim_record_run(sim_world *w, const wt_config *cfg, const float *cmd,
		   uint64_t n_frames, const char *path,
		   volatile sig_atomic_t *stop, wt_error *err);

#endif /* SIM_RECORD_H */
