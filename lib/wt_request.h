/*
 * wt_request.h - wavetrimd's control and telemetry protocol: the definition.
 *
 * This comment is the reference for anyone who drives wavetrimd: the
 * `wavetrim` CLI, scripts, live views and recorders.  The parser and the
 * reply writer below implement the control half; daemon/ implements the
 * rest exactly as written here.
 *
 * ======================================================================
 * 1. Control: REQ/REP on [daemon] control
 * ======================================================================
 *
 * wavetrimd binds a ZeroMQ REP socket.  A client connects a REQ socket and
 * sends one single-part message holding one request line; it receives one
 * single-part message holding one JSON object (RFC 8259, UTF-8, no line
 * end):
 *
 *   {"ok":true,"result":RESULT}       the request was done; RESULT is any
 *                                     JSON value, described per word below
 *   {"ok":false,"error":"TEXT"}       refused or failed; nothing changed
 *
 * A request is answered only after the loop thread has applied it (between
 * two frames), so a following `status` already shows its effect.
 *
 * Loop states
 * -----------
 *   open         every frame is answered with the flat
 *   calibrating  with the calibration's patterns (back to open when done)
 *   closed       with flat + the leaky integrator's command
 *   held         with the last command sent, unchanged
 *   fault        with the safe command (safety.safe_command: the flat, or
 *                hold the last command), sent once at once on entry and
 *                then in answer to every frame, until `open` or `close`.
 *                Entered when no frame came for driver.timeout_ms (once
 *                a first frame has come), or after
 *                safety.max_bad_frames consecutive refused or wrong-size
 *                messages, or as many consecutive stale frames (an id
 *                not above the last one: stale frames are skipped,
 *                unanswered).  A calibration in progress is dropped.
 * Every command sent is within [mirror.limit_low, mirror.limit_high] and
 * never NaN.  Every change of state is an event (section 4).
 *
 * Frames that are not faults (counted in section 3, answered or skipped):
 *   gap          ids jumped: answered; the missing ones count as dropped.
 *   out of order, duplicate
 *                an id not above the last one: skipped, unanswered
 *                (stale; an equal id also counts as a duplicate); as many
 *                in a row as safety.max_bad_frames make the fault above.
 *   late         answered as any other (the daemon cannot tell a late
 *                frame from a slow driver); no frame for driver.timeout_ms
 *                is the "driver silent" fault.
 *   invalid subaperture
 *                under sensor.min_flux, a NaN/Inf slope, or saturated (a
 *                raw pixel at or above sensor.full_scale: a clipped spot's
 *                centroid is biased): its residual is 0, so it neither
 *                drives the integrator nor enters a calibration.
 *   dark frame   fewer valid subapertures than safety.min_valid_fraction
 *                of the sensor's, never none (shutter closed, source lost,
 *                the sensor saturated, all slopes NaN): counted; closed,
 *                the integrator is not updated and the last command is
 *                held: neither the leak nor a reconstruction from part of
 *                the pupil (whose unseen actuators would drift) moves the
 *                mirror while too little is measured; open, held and
 *                fault answer as always.  The loop goes on at once when
 *                light returns.
 *
 * Request line syntax
 * -------------------
 * - At most WT_REQUEST_LINE_MAX (1024) bytes, not counting one optional
 *   line end ("\n" or "\r\n") which is ignored.  Longer requests are
 *   refused.
 * - Words are separated by blanks (space or tab); leading and trailing
 *   blanks are ignored.  A word may be written in double quotes to hold
 *   blanks; inside quotes \" is a quote and \\ a backslash (no other
 *   escapes).  Quoted words may be empty ("").
 * - Control characters (bytes 0x00..0x1f other than tab, and 0x7f) are
 *   refused anywhere.  Bytes 0x80..0xff are taken as they are (file names
 *   are bytes); text echoed back in an error is made valid UTF-8.
 * - The first word is the command word, in lower case.  Unknown words,
 *   missing arguments, extra arguments and bad numbers are refused with a
 *   reason; nothing is ever half done.
 *
 * Access
 * ------
 * ipc endpoints are reachable by whoever may enter their folder (mode
 * 0700: only the daemon's user); tcp endpoints without CURVE only on a
 * loopback address.  With daemon.secret_key, tcp endpoints use CURVE and
 * only clients whose public key is in daemon.clients or daemon.writers get
 * in (lib/wt_secure.h).  When daemon.writers is set, a CURVE client not on
 * it is read-only: status, ping, get, config and help are answered, any
 * other word is refused with "read-only client" and counted.
 *
 * Words
 * -----
 * status                 RESULT: the status object (section 3), with the
 *                        singular values of the installed calibration.
 * ping                   RESULT: "pong".  Cheap liveness check.
 * open                   Open the loop: the mirror goes to its flat and
 *                        stays there.  Allowed in every state; stops a
 *                        calibration in progress (its data is dropped) and
 *                        leaves a fault.  Leaving a fault (open or close),
 *                        the next frame's id is taken whatever it is (the
 *                        driver may have restarted from 0).
 *                        RESULT: {"state":"open"}.
 * close                  Close the loop (leaky integrator on the residual
 *                        slopes).  From open the integrator starts at the
 *                        flat; from held it continues from the held
 *                        command; from fault from the safe command.
 *                        Refused without a control matrix ("no control
 *                        matrix: calibrate or load a calibration first")
 *                        and while calibrating.  RESULT: {"state":"closed"}.
 * hold                   Freeze the command: every frame is answered with
 *                        the last command sent.  Allowed from open and
 *                        closed.  RESULT: {"state":"held"}.
 * flat                   Put the mirror back to its flat without changing
 *                        state: closed restarts the integrator from the
 *                        flat, held holds the flat.  Refused while
 *                        calibrating and in fault.  RESULT: {"state":STATE}.
 * flat capture           Make the command sent last the mirror's new flat
 *                        (e.g. after closing on a reference source); the
 *                        loop carries on from it, and `save` stores it.
 *                        Refused while calibrating and in fault.
 *                        RESULT: {"state":STATE}.
 * reference [FRAMES]     Measure the reference slopes: the mirror at its
 *                        flat, `calibration.settle` frames discarded, then
 *                        FRAMES frames averaged (default
 *                        `calibration.reference_frames`; a whole number in
 *                        that option's range).  From open only.  The loop
 *                        is `calibrating` meanwhile and returns to open.
 *                        It measures whatever wavefront reaches the sensor,
 *                        and the closed loop then drives the slopes to it:
 *                        take it with a reference source, never through the
 *                        aberration to be corrected (the loop would hold
 *                        that aberration).  Without a reference, the
 *                        reference slopes are 0 (spots on the lenslet
 *                        axes).  RESULT: {"state":"calibrating",
 *                        "kind":"reference","frames":TOTAL} (TOTAL frames
 *                        until done).
 * calibrate [single|hadamard]
 *                        Measure the interaction matrix, with the
 *                        patterns named or else `calibration.patterns`.
 *                        single: for each actuator in turn, flat + a then
 *                        flat - a (a = `calibration.amplitude`), each held
 *                        for `settle` discarded then `average` averaged
 *                        frames; column = (s+ - s-) / (2a).  hadamard: for
 *                        each of the N Hadamard patterns h_p (N the
 *                        smallest power of two >= actuators; every
 *                        actuator at +-a in every pattern), flat + a h_p
 *                        then flat - a h_p, held and averaged the same
 *                        way, decoded to D = M H / N (lib/wt_hadamard.h):
 *                        n_act times less noise variance per entry for
 *                        the same frames.  A subaperture counts only in
 *                        the frames where it is above sensor.min_flux.
 *                        Then the truncated-SVD control
 *                        matrix (modes from control.modes or
 *                        control.min_sv_ratio) is built outside the loop
 *                        and installed between two frames; a `calibration`
 *                        event reports it with the calibration report.
 *                        From open only; refused when flat +- a would
 *                        leave [limit_low, limit_high] for any actuator
 *                        (every pattern of either kind puts each
 *                        actuator at flat + a or flat - a).
 *                        RESULT: {"state":"calibrating","kind":"matrix",
 *                        "patterns":"single"|"hadamard","frames":TOTAL}.
 * set SECTION.KEY VALUE  Change a live option (see --help-config).  VALUE
 *                        is INI text (quote it if it holds blanks).  Options
 *                        that are not live are refused with "SECTION.KEY
 *                        needs a restart"; invalid values with the config
 *                        module's reason; limit_low not below limit_high
 *                        with that reason; options of the sections
 *                        wavetrimd does not read (the simulator's) with
 *                        "SECTION.KEY is read by wavetrim-sim, not by
 *                        wavetrimd".  control.modes,
 *                        control.min_sv_ratio and control.mode_gains
 *                        rebuild the control matrix from the stored SVD
 *                        (off the loop thread) and install it between two
 *                        frames; mode_gains multiplies mode i's 1/sigma_i
 *                        by entry i (strongest mode first; the last entry
 *                        repeats for the modes past the list; empty = all
 *                        1).  A loaded calibration's control matrix is
 *                        used as stored until one of these changes.
 *                        RESULT: {"key":"SECTION.KEY","value":VALUE} with
 *                        VALUE typed as for get.
 * get SECTION.KEY        RESULT: {"key":"SECTION.KEY","value":VALUE,
 *                        "live":BOOL}; VALUE is a JSON number for int and
 *                        double options, true/false for bool options, a
 *                        string otherwise (lists as their INI text).
 * config                 RESULT: {"SECTION.KEY":VALUE, ...} for every
 *                        option, in table order, typed as for get.
 * save FILE              Write the current calibration to the HDF5 file
 *                        FILE (replaced if it exists; a relative name is
 *                        taken from the daemon's working directory, so
 *                        prefer absolute names).  Refused without an
 *                        interaction matrix and a control matrix made
 *                        from it.  The file layout is lib/wt_store.h's.
 *                        RESULT: {"file":FILE}.
 * load FILE              Read a calibration file and install it (control
 *                        matrix, reference slopes, flat) between two
 *                        frames.  Refused, with the reason, when any
 *                        dimension differs from the running configuration
 *                        or the file is damaged, and while calibrating.
 *                        From closed or held the loop carries on with the
 *                        new matrix.  RESULT: {"file":FILE,"modes":K}.
 * shutdown               RESULT: "stopping"; then the daemon sends the
 *                        flat and exits 0, as on SIGTERM.
 * help                   RESULT: [{"word":W,"usage":U,"help":H}, ...].
 * reload                 Re-read the INI file the daemon was started with
 *                        (-c FILE), over the defaults, and apply every live
 *                        option of wavetrimd's sections whose value differs
 *                        from the running one, as `set` would (each a
 *                        `config` event).  All or nothing: a file that does
 *                        not read is refused with the config module's
 *                        "FILE:LINE: ..." reason; a file that changes an
 *                        option needing a restart is refused with every
 *                        such reason ("reload refused: sensor.lenslets
 *                        needs a restart, ..."); a value the loop refuses
 *                        undoes those applied before it.  Options `set`
 *                        changed and the file does not are put back to the
 *                        file's values.  The simulator's sections are
 *                        ignored.  SIGHUP does the same; its outcome is a
 *                        `reload` event and a log line.
 *                        RESULT: {"ok":true,"file":FILE,"changed":[KEY,
 *                        ...],"error":null}.
 * offset                 RESULT: {"offsets":[{"noll":J,"nm":AMOUNT}, ...]},
 *                        the Zernike offsets the closed loop holds.
 * offset zernike J AMOUNT_NM
 *                        Add AMOUNT_NM nm RMS of wavefront (Noll's
 *                        normalisation, J = 2 .. 1000, |AMOUNT_NM| <=
 *                        100000) of Noll mode J to the target: the mode's
 *                        slopes on this sensor (lib/wt_offset.h: mean
 *                        gradient over each valid subaperture times the
 *                        lenslet focal length, in pixels) are added to the
 *                        reference, so the closed loop drives the sensor's
 *                        wavefront to reference + the offsets.  Offsets add
 *                        (the same J twice sums its amounts; a sum of 0
 *                        removes it); at most 32 modes.  Allowed in every
 *                        state.  The frame records' residual slopes are s -
 *                        reference - offsets.  An `offsets` event reports
 *                        the new list.  RESULT: as `offset`.
 * offset clear           Remove every offset.  RESULT: as `offset`.
 * shape zernike J AMOUNT_NM
 *                        Open loop: put the mirror into that shape, command
 *                        = flat + R p (p the mode's slopes as for offset, R
 *                        the pseudo-inverse of the interaction matrix over
 *                        the installed modes, without control.mode_gains),
 *                        so that it adds the aberration to the beam as the
 *                        sensor sees it; the loop goes to held and holds it
 *                        (`open` or `flat` go back to the flat; a second
 *                        shape replaces the first).  From open and held
 *                        only; refused without a control matrix and when an
 *                        actuator would leave [limit_low, limit_high]
 *                        ("actuator K would be at V, outside the limits
 *                        ...").  RESULT: {"state":"held","noll":J,"nm":
 *                        AMOUNT,"largest_stroke":NUMBER} (largest |R p|).
 * record N FILE          Record the next N frames answered (every frame,
 *                        not the decimated stream; N 1 .. 100000000) into
 *                        the HDF5 file FILE (replaced; layout in
 *                        lib/wt_recording.h).  The file is created before
 *                        the reply, so a bad name is refused here; the
 *                        frames are written by a thread of their own, so
 *                        a slow or full disk never delays the loop: frames
 *                        the writer cannot keep up with are counted as
 *                        lost, and a failed write ends the recording with
 *                        a "recording_failed" event and the reason in
 *                        status.recording.error.  Refused while another
 *                        recording runs.  RESULT: {"file":FILE,"frames":N}.
 * record stop            End the recording in progress; the file keeps
 *                        the frames so far.  RESULT: the status object's
 *                        "recording" value.
 * autogain FRAMES [apply]
 *                        Choose per-mode gains (modal gain optimisation,
 *                        lib/wt_modalgain.h) from the residual slopes and
 *                        commands of the next FRAMES frames (64 .. 65536;
 *                        open, closed or held), projected on the installed
 *                        control matrix's modes (u_i . s, slope space); in
 *                        closed loop from the pseudo-open-loop record
 *                        y_i(t) - sigma_i a_i(t - d), a_i = v_i . (c -
 *                        flat), d = control.loop_delay.  It runs in the
 *                        background: the reply comes at once, the outcome
 *                        is an "autogain" event and `autogain status`.
 *                        With apply the chosen loop gains g_i are
 *                        installed as control.gain G and control.mode_gains
 *                        g_i / G (G stays unless a factor would exceed 2),
 *                        and FRAMES more frames measure the result.  Needs
 *                        a control matrix made from an interaction matrix;
 *                        refused while one runs.  RESULT: as for status.
 * autogain status        RESULT: {"stage":"none"|"recording"|"measuring"|
 *                        "done"|"failed","frames":F,"frames_done":N,
 *                        "error":TEXT (failed only), and once optimised:
 *                        "modes":K,"delay":d,"state":STATE during the
 *                        record,"loop_gains":[g_i ...] chosen,
 *                        "current_loop_gains":[...] before,
 *                        "predicted":{"current":V,"optimised":V},
 *                        "measured":V|null (closed loop: the residual in
 *                        the record),"applied":BOOL,"gain":G,
 *                        "mode_gains":[...] (when applied),
 *                        "achieved":V|null (measured after applying),
 *                        "noise":V (the measurement noise, estimated from
 *                        the top of each mode's spectrum)}; every V is a
 *                        variance summed over the controlled modes,
 *                        pixels^2 (slope space); measured and achieved
 *                        are var(y_i) - noise, the residual without the
 *                        noise of its measurement, as predicted.
 *
 * ======================================================================
 * 2. Telemetry: PUB on [daemon] telemetry
 * ======================================================================
 *
 * wavetrimd binds a PUB socket.  Every message is one part: a topic word,
 * one space, and the body.  Subscribe to "status ", "event " or "frame "
 * (with the space) or to "" for everything.
 *
 *   "status " + JSON  the status object (section 3) without the singular
 *                     values, daemon.status_hz times per second
 *   "event "  + JSON  one event (section 4), when it happens
 *   "frame "  + BIN   a frame record (section 5), every
 *                     daemon.frame_decimation-th frame answered
 *   "image "  + BIN   a decimated sensor image (section 6), at most
 *                     daemon.image_hz times per second (0: never), from
 *                     frames that carry pixels
 *
 * PUB never waits for a subscriber: one that falls more than
 * daemon.telemetry_queue messages behind loses messages (the frame ids of
 * the records show the gaps); the daemon cannot count them.
 *
 * ======================================================================
 * 3. The status object
 * ======================================================================
 *
 *   {"state":"open"|"calibrating"|"closed"|"held"|"fault",
 *    "fault":null|"driver silent"|"bad frames"|"stale frames",
 *    "uptime_s":NUMBER,
 *    "frames":N,                 frames answered since start
 *    "last_frame":ID|null,       id of the newest frame accepted
 *    "driver_seen":BOOL,         a frame arrived within driver.timeout_ms
 *    "frame_rate_hz":NUMBER,     over the last status period
 *    "latency_us":{"median":NUMBER,"max":NUMBER}|null,
 *                                receive -> send, over the last period
 *    "residual_rms":NUMBER|null, RMS of the residual slopes, pixels, mean
 *                                over the last period
 *    "clipped_actuators":N,      actuators at a limit in the newest frame
 *    "invalid_subapertures":N,   under min_flux in the newest frame
 *    "counts":{"received":N,     frame messages received, good or bad
 *              "dropped":N,      frames missing from the id sequence
 *              "stale":N,        frames skipped: id not above the last
 *              "refused":N,      messages refused by the wire checks
 *              "bad_dimensions":N, well-formed, but not this sensor's size
 *              "wrong_kind":N,   a command message sent to us as a frame
 *              "rejected_updates":N, integrator updates refused (NaN/Inf)
 *              "clipped_frames":N,   frames with an actuator at a limit
 *              "send_failed":N,  commands ZeroMQ could not take
 *              "telemetry_dropped":N, records lost because the ring was
 *                                full
 *              "faults":N,
 *              "duplicates":N,   stale frames whose id equals the last
 *                                one (also counted in stale)
 *              "saturated_frames":N, frames with a saturated
 *                                subaperture (a raw pixel at or above
 *                                sensor.full_scale)
 *              "saturated_subapertures":N, such subapertures, summed
 *                                over frames
 *              "dark_frames":N}, frames with too few valid
 *                                subapertures (safety.min_valid_fraction)
 *    "refused":{"short":N,"magic":N,"version":N,"kind":N,"dims":N,
 *               "payload":N,"length":N},   refused messages by reason
 *    "access":{"curve":BOOL,      daemon.secret_key is set
 *              "let_in":N,       CURVE clients the ZAP handler let in
 *              "refused":N,      CURVE handshakes refused (unlisted key)
 *              "read_only_refused":N}, requests refused to read-only
 *                                clients ("read-only client")
 *    "gain":NUMBER,"leak":NUMBER,
 *    "modes":N,                  modes in the installed control matrix
 *                                (0: none)
 *    "mvm_split":null|{"cpu":N,"row":N}, control.mvm_split in force: the
 *                                worker's CPU and its first row of u = R s
 *                                (null: off, or it could not start)
 *    "calibration":{"matrix":BOOL,"reference":BOOL,
 *                   "source":"measured"|"file"|null,"file":TEXT|null,
 *                   "created":TEXT|null,   ISO 8601 UTC
 *                   "modes":N,"recommended":N,"condition":NUMBER|null,
 *                   "singular_values":[NUMBER, ...]},  control reply only
 *    "calibrating":null|{"kind":"reference"|"matrix",
 *                        "frames_done":N,"frames_total":N},
 *    "offsets":[{"noll":J,"nm":AMOUNT}, ...],  held Zernike offsets
 *    "recording":null|{"file":TEXT,   the last recording (null: none yet)
 *                      "state":"recording"|"finishing"|"done"|"stopped"|
 *                              "failed",
 *                      "frames_requested":N,"frames_taken":N (handed to
 *                      the writer),"frames":N (written to the file),
 *                      "frames_lost":N (the writer was behind),
 *                      "telemetry_dropped":N (ring full meanwhile),
 *                      "error":TEXT|null}}
 *
 * ======================================================================
 * 4. Events
 * ======================================================================
 *
 * {"event":NAME,"t_ns":NS,"frame":ID|null, ...}: t_ns is the daemon's
 * CLOCK_MONOTONIC when it happened, frame the newest frame id then.
 * NAME and its further members:
 *
 *   "state"                 "from":STATE (null at start),"to":STATE,
 *                           "why":"request"|"calibration done"|"fault"|
 *                           "start"
 *   "fault"                 "reason":"driver silent"|"bad frames"|
 *                           "stale frames","count":N (frames or ms silent)
 *   "calibration_started"   "kind":"reference"|"matrix","frames":TOTAL
 *   "calibration_done"      "kind":KIND  (measurement finished)
 *   "calibration_aborted"   "kind":KIND,"why":"request"|"fault"
 *   "calibration"           the report, once the control matrix is built:
 *                           "modes":K,"recommended":K,"condition":NUMBER,
 *                           "singular_values":[...],"missing":N
 *                           ((subaperture, actuator) pairs without a valid
 *                           frame in the push or the pull: entry 0),
 *                           "weak_actuators":[...] (actuators the
 *                           report flags dead or weak),
 *                           "report":REPORT|null (the calibration
 *                           report: measurement settings and noise,
 *                           per-actuator response norms and centroids,
 *                           flags with their evidence, misregistration,
 *                           the spectrum with the modes it recommends
 *                           and why; the object of lib/wt_calreport.h,
 *                           also stored in the saved file under
 *                           /report).  "recommended" is the count by
 *                           control.min_sv_ratio; the report's
 *                           spectrum.recommended is the count the
 *                           measurement noise supports.
 *   "matrix_installed"      "modes":K,"condition":NUMBER
 *   "reference_installed"
 *   "flat_changed"
 *   "driver"                "what":"first frame"|"resync","id":ID
 *   "warning"               "what":TEXT,"count":N (counters that grew in
 *                           the last status period: at most one event per
 *                           counter per period; also a control matrix that
 *                           could not be built, count 1)
 *   "config"                "key":"SECTION.KEY","value":VALUE
 *   "reload"                "ok":BOOL,"file":FILE,"changed":[KEY, ...],
 *                           "error":TEXT|null (a `reload` or SIGHUP)
 *   "offsets"               "offsets":[{"noll":J,"nm":AMOUNT}, ...]
 *   "saved", "loaded"       "file":TEXT
 *   "autogain"              the members of `autogain status`, when done
 *                           or failed
 *   "recording_done", "recording_failed"
 *                           "file":TEXT,"frames":N (written),
 *                           "frames_lost":N,"telemetry_dropped":N, and
 *                           for a failure "error":TEXT
 *   "stopping"
 *
 * ======================================================================
 * 5. Frame records (topic "frame ")
 * ======================================================================
 *
 * After the 6 bytes "frame ": a wt_frame_record header of
 * WT_FRAME_HEADER_BYTES (64) bytes, then arrays of float32.  Every field
 * little-endian, no padding.  Because of the 6-byte topic the body is not
 * aligned inside the message: C readers memcpy it out, numpy readers use
 * np.frombuffer(msg, dtype, count, offset).
 *
 *   offset size type     field
 *        0    4 char[4]  magic "WTFR"
 *        4    2 u16      version (1)
 *        6    2 u16      state (0 open, 1 calibrating, 2 closed, 3 held,
 *                        4 fault)
 *        8    8 u64      frame id (the sequence of the frame answered)
 *       16    8 u64      driver timestamp_ns from the frame header
 *       24    8 u64      receive time, daemon CLOCK_MONOTONIC ns
 *       32    8 u64      send time of the command, same clock
 *       40    4 u32      N, valid subapertures
 *       44    4 u32      A, valid actuators
 *       48    4 u32      subapertures invalid in this frame
 *       52    4 u32      actuators clipped in this frame
 *       56    4 f32      residual slope RMS, pixels
 *       60    4 u32      flags: bit 0 integrator update rejected (NaN/Inf),
 *                        bit 1 the driver sent slopes (flux is 0), bit 2
 *                        the command could not be sent, bit 3 dark (too
 *                        few valid subapertures: closed, command held),
 *                        bit 4 a subaperture saturated
 *       64   8N f32[2N]  residual slopes s - ref - offset, pixels: the N x
 *                        slopes then the N y slopes
 *   64+8N    4N f32[N]   flux per subaperture, counts
 *   64+12N   4A f32[A]   command sent (normalised stroke)
 *
 * Total after the topic: 64 + 12 N + 4 A bytes.
 *
 * ======================================================================
 * 6. Sensor images (topic "image ")
 * ======================================================================
 *
 * After the 6 bytes "image ": a header of WT_IMAGE_HEADER_BYTES (48)
 * bytes, then the pixels.  Little-endian, no padding (lib/wt_image.h has
 * the struct, the encoder and a checking decoder).
 *
 *   offset size type     field
 *        0    4 char[4]  magic "WTIM"
 *        4    2 u16      version (1)
 *        6    2 u16      loop state, numbered as in frame records
 *        8    8 u64      frame id of the frame the pixels came with
 *       16    8 u64      its receive time, daemon CLOCK_MONOTONIC ns
 *       24    4 u32      W, image width in pixels (1 .. 128)
 *       28    4 u32      H, image height in pixels (1 .. 128)
 *       32    4 u32      b, bin: sensor pixels per image pixel each way,
 *                        the smallest with ceil(side / b) <= 128
 *       36    4 u32      sensor width in pixels (W = ceil(it / b))
 *       40    4 u32      sensor height in pixels (H = ceil(it / b))
 *       44    4 f32      scale: sensor counts per stored unit (1 now)
 *       48  2WH u16[WH]  rows top to bottom; pixel (i, j) is the mean of
 *                        the sensor pixels (x, y) with floor(x / b) = i,
 *                        floor(y / b) = j (fewer at the right and bottom
 *                        edges), rounded to the nearest count, as the
 *                        driver sent them (before background subtraction)
 *
 * Total after the topic: 48 + 2 W H bytes (32 KiB at most).  The loop
 * thread copies the pixels of a frame into one of two slots made at start
 * when daemon.image_hz allows and a slot is free (otherwise that image is
 * skipped, never waited for); the telemetry thread bins and publishes.
 * Frames sent as slopes carry no pixels and give no images.
 */
#ifndef WT_REQUEST_H
#define WT_REQUEST_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "wt_config.h"
#include "wt_error.h"

/** Longest request accepted, in bytes, not counting one line end. */
#define WT_REQUEST_LINE_MAX 1024

/** Loop states, as numbered in frame records. */
enum wt_loop_state {
	WT_STATE_OPEN = 0,
	WT_STATE_CALIBRATING = 1,
	WT_STATE_CLOSED = 2,
	WT_STATE_HELD = 3,
	WT_STATE_FAULT = 4,
	WT_STATE_COUNT
};

/** "open", "calibrating", ...; "?" when out of range. */
const char *wt_state_name(int state);

/** The command words. */
enum wt_req_word {
	WT_REQ_STATUS,
	WT_REQ_PING,
	WT_REQ_OPEN,
	WT_REQ_CLOSE,
	WT_REQ_HOLD,
	WT_REQ_FLAT,
	WT_REQ_REFERENCE,
	WT_REQ_CALIBRATE,
	WT_REQ_SET,
	WT_REQ_GET,
	WT_REQ_CONFIG,
	WT_REQ_SAVE,
	WT_REQ_LOAD,
	WT_REQ_SHUTDOWN,
	WT_REQ_HELP,
	WT_REQ_RELOAD,
	WT_REQ_OFFSET,
	WT_REQ_SHAPE,
	WT_REQ_RECORD,
	WT_REQ_AUTOGAIN,
	WT_REQ_COUNT
};

/** What an `offset` request does. */
enum wt_offset_op {
	WT_OFFSET_SHOW = 0, /**< offset */
	WT_OFFSET_CLEAR,    /**< offset clear */
	WT_OFFSET_ADD,	    /**< offset zernike J AMOUNT_NM */
};

/** Largest |AMOUNT_NM| of an offset or a shape, nm RMS. */
#define WT_REQUEST_AMOUNT_MAX_NM 100000.0

/** One parsed request.  Strings are unescaped and terminated. */
typedef struct wt_request {
	enum wt_req_word word;
	const wt_option *option;	     /**< set, get: the option named */
	char key[128];			     /**< set, get: "section.key" */
	char value[WT_REQUEST_LINE_MAX + 1]; /**< set: the value text */
	char path[WT_REQUEST_LINE_MAX + 1];  /**< save, load: the file */
	long frames;		     /**< reference: FRAMES, 0 = the default */
	int patterns;		     /**< calibrate: index in
				      *   calibration.patterns' choices (0
				      *   single, 1 hadamard), -1 = the
				      *   option */
	bool capture;		     /**< flat capture */
	enum wt_offset_op offset_op; /**< offset: show, clear or add */
	int noll;		     /**< offset zernike, shape: J */
	double amount_nm;	     /**< offset zernike, shape: AMOUNT_NM */
	bool stop;		     /**< record stop */
	bool apply;		     /**< autogain ... apply */
	bool status;		     /**< autogain status */
} wt_request;

/**
 * Parse and validate one request of len bytes at line (need not be
 * terminated).  On success fills *req and returns 0.  Otherwise returns
 * -EINVAL (-EMSGSIZE for an overlong request) with the reason in *err,
 * e.g. "unknown word 'frobnicate' (try help)", "'status' takes no
 * arguments", "usage: set SECTION.KEY VALUE", "sensor.lenslets needs a
 * restart", "control.gain: ..." (the config module's reason for a bad
 * value), "FRAMES: 'x1' is not a whole number".  Never reads outside
 * line[0 .. len - 1].
 */
int wt_request_parse(const char *line, size_t len, wt_request *req,
		     wt_error *err);

/** The word's name ("status", ...); "?" when out of range. */
const char *wt_request_word_name(enum wt_req_word word);

/** Usage line of a word ("set SECTION.KEY VALUE"); "?" when unknown. */
const char *wt_request_usage(enum wt_req_word word);

/** One line of help of a word; "?" when unknown. */
const char *wt_request_help(enum wt_req_word word);

/**
 * Write {"ok":true,"result":RESULT} into buf (len bytes), where
 * result_json is JSON text inserted as it is (NULL: null).  Returns the
 * length, or -ENOSPC when it does not fit (buf then holds
 * {"ok":false,"error":"reply too long"} if that fits).
 */
int wt_request_reply_ok(char *buf, size_t len, const char *result_json);

/**
 * Write {"ok":false,"error":TEXT} into buf, TEXT escaped as a JSON string
 * (RFC 8259 section 7; invalid UTF-8 replaced by U+FFFD).  Returns the
 * length, or -ENOSPC.
 */
int wt_request_reply_error(char *buf, size_t len, const char *msg);

/*
 * Frame records: see section 5 above.  On a little-endian host this struct
 * is the wire layout byte for byte.
 */
#define WT_FRAME_MAGIC	      "WTFR"
#define WT_FRAME_VERSION      1
#define WT_FRAME_HEADER_BYTES 64
#define WT_FRAME_TOPIC	      "frame "

/** Frame record flags. */
enum wt_frame_flags {
	WT_FRAME_REJECTED = 1u << 0,
	WT_FRAME_SLOPES_IN = 1u << 1,
	WT_FRAME_SEND_FAILED = 1u << 2,
	WT_FRAME_DARK = 1u << 3,
	WT_FRAME_SATURATED = 1u << 4,
};

/** The 64-byte header of a frame record. */
typedef struct wt_frame_record {
	char magic[4];
	uint16_t version;
	uint16_t state;
	uint64_t frame_id;
	uint64_t driver_ns;
	uint64_t recv_ns;
	uint64_t send_ns;
	uint32_t n_subaps;
	uint32_t n_act;
	uint32_t n_invalid;
	uint32_t n_clipped;
	float residual_rms;
	uint32_t flags;
} wt_frame_record;

_Static_assert(sizeof(wt_frame_record) == WT_FRAME_HEADER_BYTES,
	       "frame record header is 64 bytes");

/** Bytes of a frame record (after the topic) for N subapertures and A
 * actuators. */
static inline size_t wt_frame_record_bytes(size_t n_subaps, size_t n_act)
{
	return WT_FRAME_HEADER_BYTES + 4 * (3 * n_subaps + n_act);
}

#endif /* WT_REQUEST_H */
