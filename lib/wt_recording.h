/*
 * wt_recording.h - a telemetry recording and its HDF5 file.
 *
 * A recording holds every frame the loop answered while it ran (not the
 * decimated "frame " stream), one row per frame, in the order the loop
 * answered them.  F is the number of frames written, N the valid
 * subapertures, A the valid actuators.
 *
 *   /                 attributes: format = "wavetrim recording",
 *                     format_version = 1 (int32), created (UTC,
 *                     "YYYY-MM-DDTHH:MM:SSZ"), n_subaps (int32),
 *                     n_act (int32), frames_requested (int64); written
 *                     when the recording ends: frames (int64, = F),
 *                     frames_lost (int64: frames the recorder could not
 *                     keep up with), telemetry_dropped (int64: records
 *                     the loop could not hand to telemetry meanwhile),
 *                     complete (int32: 1 when F = frames_requested and
 *                     nothing was lost), error (string, "" when none)
 *   /frame_id         uint64 [F]   the driver's frame id
 *   /driver_ns        uint64 [F]   the driver's timestamp of the frame
 *   /recv_ns          uint64 [F]   daemon CLOCK_MONOTONIC at receipt
 *   /send_ns          uint64 [F]   daemon CLOCK_MONOTONIC at the answer
 *   /latency_us       float64 [F]  (send_ns - recv_ns) / 1000
 *   /state            uint16 [F]   loop state (0 open, 1 calibrating,
 *                                  2 closed, 3 held, 4 fault); attribute
 *                                  names = "open calibrating closed held
 *                                  fault"
 *   /flags            uint32 [F]   bit 0 integrator update rejected,
 *                                  bit 1 the driver sent slopes, bit 2
 *                                  the command could not be sent
 *   /n_invalid        uint32 [F]   subapertures under the flux threshold
 *   /n_clipped        uint32 [F]   actuators at a limit
 *   /residual_rms     float32 [F]  RMS of the residual slopes, pixels
 *   /slopes           float32 [F][2N] residual slopes s - ref - offset,
 *                                  pixels: the N x slopes, then the N y
 *   /flux             float32 [F][N] flux per subaperture, counts
 *   /commands         float32 [F][A] command sent, normalised stroke
 *   /config           string: INI text of the daemon's configuration
 *                     when the recording started (may be empty)
 *
 * Every dataset is chunked along frames and extendible, so a recording that
 * stops early (stopped, or the disk filled) is still a valid file holding
 * the frames written so far.  Each append is flushed to the operating
 * system, so a full or failing disk is reported by the append that hit it.
 *
 * The appended records are the frame records of lib/wt_request.h (section
 * 5: the 64-byte header, then slopes, flux, commands as float32).
 *
 * Threads: Debian's HDF5 1.10 is built thread-safe (H5_HAVE_THREADSAFE),
 * so one thread may write a recording while another saves a calibration;
 * a given wt_recording is used by one thread at a time.
 */
#ifndef WT_RECORDING_H
#define WT_RECORDING_H

#include <stddef.h>
#include <stdint.h>

#include "wt_error.h"

#define WT_RECORDING_FORMAT	    "wavetrim recording"
#define WT_RECORDING_FORMAT_VERSION 1

/**
 * Call once at the start of a program that writes recordings, before any
 * other HDF5 use.  When a disk fills, HDF5 1.10 cannot close the file
 * (its metadata cannot be written) and its exit handler then crashes on
 * the half-closed file; this turns that handler off (H5dont_atexit), so
 * the program exits normally, leaving the failed file as it was.
 */
void wt_recording_process_init(void);

/** A recording being written (opaque). */
typedef struct wt_recording wt_recording;

/**
 * Create (truncate) the file at path for frames of n_subaps subapertures
 * and n_act actuators; config_ini may be NULL.  -EINVAL for bad sizes or
 * a NULL path/out, -EIO (with HDF5's reason) when the file cannot be made.
 */
int wt_recording_create(const char *path, int n_subaps, int n_act,
			long long frames_requested, const char *config_ini,
			wt_recording **out, wt_error *err);

/**
 * Append count frame records, each stride bytes apart starting at records
 * (each a wt_frame_record header followed by its arrays, for this file's
 * N and A), then flush.  -EINVAL for a record of other sizes, -EIO when
 * writing or flushing failed (the disk is full, or failing); the file then
 * holds the frames of earlier appends.
 */
int wt_recording_append(wt_recording *r, const void *records, size_t stride,
			int count, wt_error *err);

/** Frames appended so far. */
long long wt_recording_frames(const wt_recording *r);

/**
 * Write the closing attributes (error may be NULL or "") and close the
 * file; r is freed in every case.  -EIO when that failed.  NULL is fine.
 */
int wt_recording_close(wt_recording *r, long long frames_lost,
		       long long telemetry_dropped, const char *error,
		       wt_error *err);

#endif /* WT_RECORDING_H */
