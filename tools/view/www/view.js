/*
 * wavetrim-view page: draws what the server streams, sends the operator's
 * requests through the server.  No logic of the loop lives here.
 *
 * Colour maps (the server sends both tables, lib/wt_draw.h has their
 * sources): magnitudes (sensor counts, flux) in viridis, perceptually
 * uniform and sequential, 0 at the dark end; signed values (wavefront nm,
 * mirror stroke) in cool-warm, diverging, white at 0, symmetric limits.
 * Every map has a colour bar with its unit; maps of the sensor plane have a
 * length bar too.
 */
'use strict';

(function () {
  const HISTORY_MAX = 1200;
  const STALE_S = 3;

  const st = {
    setup: null,
    maps: null,       // {viridis: [[r,g,b]...], coolwarm: [...]}
    tick: null,       // the newest tick
    frame: null,      // the newest frame that carried arrays
    image: null,      // the newest sensor image: {w, h, ..., px: Uint8Array}
    images: 0,
    hist: [],
    lastSeq: null,
    calibSeq: null,
    calib: null,
    ticks: 0,
    dirty: false,
  };

  // For tests and curious operators.
  window.wtview = {
    ticks: () => st.ticks,
    histLen: () => st.hist.length,
    hasFrame: () => st.frame !== null,
    images: () => st.images,
    imageFrame: () => (st.image ? st.image.frame : null),
    wavefrontRms: () => (st.tick && st.tick.frame ? st.tick.frame.rms_nm : null),
    flagKinds: () => (st.calib && st.calib.flags ? st.calib.flags.names : null),
    latencyRecords: () => (st.tick && st.tick.latency ? st.tick.latency.n : 0),
  };

  const $ = (id) => document.getElementById(id);

  function fmt(v, digits) {
    if (v === null || v === undefined || !Number.isFinite(v)) {
      return 'n/a';
    }
    const a = Math.abs(v);
    if (a !== 0 && (a >= 1e5 || a < 1e-3)) {
      return v.toExponential(Math.max(0, digits - 1));
    }
    return String(Number(v.toPrecision(digits)));
  }

  // Smallest 1, 2, 2.5 or 5 times a power of ten >= v.
  function niceCeil(v) {
    if (!(v > 0) || !Number.isFinite(v)) {
      return 1;
    }
    const p = Math.pow(10, Math.floor(Math.log10(v)));
    for (const s of [1, 2, 2.5, 5, 10]) {
      if (s * p >= v * (1 - 1e-9)) {
        return s * p;
      }
    }
    return 10 * p;
  }

  function decodeMap(hex) {
    const out = [];
    for (let k = 0; k + 6 <= hex.length; k += 6) {
      out.push([0, 2, 4].map((o) => parseInt(hex.substr(k + o, 2), 16)));
    }
    return out;
  }

  function colour(map, t) {
    if (!Number.isFinite(t)) {
      return '#888';
    }
    const lut = st.maps[map];
    const c = lut[Math.round(Math.min(1, Math.max(0, t)) * (lut.length - 1))];
    return `rgb(${c[0]},${c[1]},${c[2]})`;
  }

  /* --- canvas helpers -------------------------------------------------- */

  function prepare(id) {
    const cv = $(id);
    const dpr = window.devicePixelRatio || 1;
    const w = cv.clientWidth;
    const h = cv.clientHeight;
    if (cv.width !== Math.round(w * dpr) || cv.height !== Math.round(h * dpr)) {
      cv.width = Math.round(w * dpr);
      cv.height = Math.round(h * dpr);
    }
    const g = cv.getContext('2d');
    g.setTransform(dpr, 0, 0, dpr, 0, 0);
    g.clearRect(0, 0, w, h);
    g.font = '11px "DejaVu Sans", sans-serif';
    g.textBaseline = 'alphabetic';
    return { g, w, h };
  }

  function say(g, x, y, text, align, col) {
    g.fillStyle = col || '#222';
    g.textAlign = align || 'left';
    g.fillText(text, x, y);
  }

  function nothing(c, text) {
    say(c.g, c.w / 2, c.h / 2, text, 'center', '#888');
  }

  // Square drawing area on the left, a column for the scale on the right.
  function square(c) {
    const s = Math.max(40, Math.min(c.w - 90, c.h - 4));
    return { x: 2, y: 2, s, bx: s + 20 };
  }

  function colourBar(c, x, y, h, map, lo, hi, unit) {
    const g = c.g;
    const lut = st.maps[map];
    for (let k = 0; k < h; k++) {
      const q = lut[Math.round((1 - k / (h - 1)) * (lut.length - 1))];
      g.fillStyle = `rgb(${q[0]},${q[1]},${q[2]})`;
      g.fillRect(x, y + k, 12, 1.5);
    }
    g.strokeStyle = '#888';
    g.lineWidth = 1;
    g.strokeRect(x + 0.5, y + 0.5, 12, h);
    say(g, x + 17, y + 8, fmt(hi, 3));
    say(g, x + 17, y + h / 2 + 4, fmt((lo + hi) / 2, 3));
    say(g, x + 17, y + h, fmt(lo, 3));
    say(g, x, y - 6, unit);
  }

  function arrow(g, x0, y0, x1, y1, head) {
    const len = Math.hypot(x1 - x0, y1 - y0);
    if (len < 0.75) {
      g.beginPath();
      g.arc(x0, y0, 0.9, 0, 2 * Math.PI);
      g.fill();
      return;
    }
    const ux = (x0 - x1) / len;
    const uy = (y0 - y1) / len;
    const h = Math.min(head, 0.45 * len);
    const ca = Math.cos(0.45);
    const sa = Math.sin(0.45);
    g.beginPath();
    g.moveTo(x0, y0);
    g.lineTo(x1, y1);
    g.moveTo(x1 + h * (ux * ca - uy * sa), y1 + h * (ux * sa + uy * ca));
    g.lineTo(x1, y1);
    g.lineTo(x1 + h * (ux * ca + uy * sa), y1 + h * (-ux * sa + uy * ca));
    g.stroke();
  }

  function pupil(g, a) {
    g.strokeStyle = '#888';
    g.lineWidth = 1;
    g.beginPath();
    g.arc(a.x + a.s / 2, a.y + a.s / 2, a.s / 2, 0, 2 * Math.PI);
    g.stroke();
  }

  // Lenslet k: centre and side in pixels (the grid spans the pupil).
  function cell(a, k) {
    const L = st.setup.lenslets;
    const half = a.s / 2;
    return {
      x: a.x + half + L.x[k] * half,
      y: a.y + half + L.y[k] * half,
      side: L.pitch * half,
    };
  }

  // A length bar at the lower left of a map of the sensor plane (the
  // lenslet grid spans the sensor), on a white label.
  function lengthBar(c, a) {
    const total = st.setup.sensor_px * st.setup.pixel_um;
    if (!(total > 0)) {
      return;
    }
    const um = niceCeil(0.1 * total);
    const w = um / total * a.s;
    const label = um >= 1000 ? `${fmt(um / 1000, 3)} mm` : `${fmt(um, 3)} \u00b5m`;
    const g = c.g;
    g.fillStyle = 'rgba(255,255,255,0.9)';
    g.fillRect(a.x + 2, a.y + a.s - 26, Math.max(w, g.measureText(label).width) + 10, 24);
    g.fillStyle = '#222';
    g.fillRect(a.x + 6, a.y + a.s - 9, w, 3);
    say(g, a.x + 6, a.y + a.s - 13, label);
  }

  function drawImage() {
    const c = prepare('c-image');
    const a = square(c);
    const g = c.g;
    const im = st.image;
    const f = st.frame;
    if (!im) {
      nothing(c, st.setup.image_hz > 0 ? 'no image yet' :
        'daemon.image_hz is 0: no images');
      return;
    }
    const lut = st.maps.viridis;
    const img = new ImageData(im.w, im.h);
    for (let k = 0; k < im.w * im.h; k++) {
      const q = lut[im.px[k]];
      img.data[4 * k] = q[0];
      img.data[4 * k + 1] = q[1];
      img.data[4 * k + 2] = q[2];
      img.data[4 * k + 3] = 255;
    }
    const off = document.createElement('canvas');
    off.width = im.w;
    off.height = im.h;
    off.getContext('2d').putImageData(img, 0, 0);
    g.imageSmoothingEnabled = false;
    g.drawImage(off, a.x, a.y, a.s * im.w * im.bin / im.sensor[0],
      a.s * im.h * im.bin / im.sensor[1]);
    const n = st.setup.lenslets.x.length;
    let invalid = 0;
    g.lineWidth = 1;
    for (let k = 0; k < n; k++) {
      const p = cell(a, k);
      if (!f || f.valid[k] === '1') {
        g.strokeStyle = 'rgba(200,205,210,0.55)';
        g.strokeRect(p.x - p.side / 2 + 0.5, p.y - p.side / 2 + 0.5,
          p.side - 1, p.side - 1);
      } else {
        invalid++;
        g.strokeStyle = '#e74c3c';
        g.lineWidth = 1.5;
        g.beginPath();
        g.moveTo(p.x - p.side / 3, p.y - p.side / 3);
        g.lineTo(p.x + p.side / 3, p.y + p.side / 3);
        g.moveTo(p.x - p.side / 3, p.y + p.side / 3);
        g.lineTo(p.x + p.side / 3, p.y - p.side / 3);
        g.stroke();
        g.lineWidth = 1;
      }
    }
    lengthBar(c, a);
    colourBar(c, a.bx, 20, a.s - 30, 'viridis', 0, im.full_scale, 'counts');
    $('cap-image').textContent =
      `frame ${im.frame}: ${im.w}\u00d7${im.h} of the ` +
      `${im.sensor[0]}\u00d7${im.sensor[1]} px sensor (mean of ` +
      `${im.bin}\u00d7${im.bin}), peak ${fmt(im.max, 4)} counts; grid: ` +
      `subapertures, \u00d7: ${invalid} under sensor.min_flux`;
  }

  /* --- panels ------------------------------------------------------------ */

  function drawSlopes() {
    const c = prepare('c-slopes');
    const a = square(c);
    const g = c.g;
    const f = st.frame;
    const n = st.setup.lenslets.x.length;
    let big = 0;
    for (let k = 0; k < n; k++) {
      const p = cell(a, k);
      const ok = !f || f.valid[k] === '1';
      g.fillStyle = ok ? '#f2f2f2' : '#c8c8c8';
      g.fillRect(p.x - p.side / 2 + 0.5, p.y - p.side / 2 + 0.5,
        p.side - 1, p.side - 1);
      if (f && ok) {
        big = Math.max(big, Math.hypot(f.sx[k], f.sy[k]));
      }
    }
    pupil(g, a);
    if (!f) {
      nothing(c, 'no frame record yet');
      return;
    }
    const ref = niceCeil(big > 0 ? big : 0.1);
    const side = cell(a, 0).side;
    const scale = 0.9 * side / ref;
    g.strokeStyle = g.fillStyle = '#222';
    g.lineWidth = 1.2;
    for (let k = 0; k < n; k++) {
      if (f.valid[k] !== '1') {
        continue;
      }
      const p = cell(a, k);
      arrow(g, p.x, p.y, p.x + f.sx[k] * scale, p.y + f.sy[k] * scale,
        0.3 * side);
    }
    say(g, a.bx, 16, 'scale');
    g.strokeStyle = g.fillStyle = '#222';
    arrow(g, a.bx, 30, a.bx + ref * scale, 30, 0.3 * side);
    say(g, a.bx, 48, `${fmt(ref, 3)} px`);
    lengthBar(c, a);
    g.fillStyle = '#c8c8c8';
    g.fillRect(a.bx, 66, 10, 10);
    say(g, a.bx + 14, 75, 'invalid');
    $('cap-slopes').textContent =
      `frame ${f.id}: ${n} subapertures, ${f.invalid} invalid this frame; ` +
      `residual = slopes \u2212 reference \u2212 offset, RMS ${fmt(f.rms_px, 3)} px`;
  }

  function drawWavefront() {
    const c = prepare('c-wavefront');
    const a = square(c);
    const g = c.g;
    const f = st.frame;
    pupil(g, a);
    if (!f || !f.map) {
      nothing(c, f ? 'Zernike fit failed' : 'no frame record yet');
      return;
    }
    const m = st.setup.map;
    const top = niceCeil(f.map.max_nm > 0 ? f.map.max_nm : 1);
    const lut = st.maps.coolwarm;
    const img = new ImageData(m, m);
    for (let k = 0; k < m * m; k++) {
      const v = f.map.q[k] / 127 * f.map.max_nm;
      const t = Math.min(1, Math.max(0, (v / top + 1) / 2));
      const q = lut[Math.round(t * (lut.length - 1))];
      img.data[4 * k] = q[0];
      img.data[4 * k + 1] = q[1];
      img.data[4 * k + 2] = q[2];
      img.data[4 * k + 3] = 255;
    }
    const off = document.createElement('canvas');
    off.width = off.height = m;
    off.getContext('2d').putImageData(img, 0, 0);
    g.save();
    g.beginPath();
    g.arc(a.x + a.s / 2, a.y + a.s / 2, a.s / 2, 0, 2 * Math.PI);
    if (st.setup.obscuration > 0) {
      g.arc(a.x + a.s / 2, a.y + a.s / 2, a.s / 2 * st.setup.obscuration,
        0, 2 * Math.PI, true);
    }
    g.clip();
    g.imageSmoothingEnabled = true;
    g.drawImage(off, a.x, a.y, a.s, a.s);
    g.restore();
    pupil(g, a);
    lengthBar(c, a);
    colourBar(c, a.bx, 20, a.s - 30, 'coolwarm', -top, top, 'nm');
    const modes = st.setup.modes;
    $('cap-wavefront').textContent =
      `RMS ${fmt(f.rms_nm, 4)} nm, Strehl ${fmt(f.strehl, 3)} ` +
      `(Mar\u00e9chal at ${st.setup.wavelength_nm} nm); least-squares fit ` +
      `of Zernike modes ${modes[0]}\u2013${modes[1]} (Noll) to the slopes`;
  }

  function drawCommand() {
    const c = prepare('c-command');
    const a = square(c);
    const g = c.g;
    const f = st.frame;
    const A = st.setup.actuators;
    const half = a.s / 2;
    const rpx = half / Math.max(1, A.n * A.pitch / 2);
    const ox = a.x + half;
    const oy = a.y + half;
    g.strokeStyle = '#888';
    g.lineWidth = 1;
    g.beginPath();
    g.arc(ox, oy, rpx, 0, 2 * Math.PI);
    g.stroke();
    const r = 0.42 * A.pitch * rpx;
    for (let k = 0; k < A.x.length; k++) {
      const x = ox + A.x[k] * rpx;
      const y = oy + A.y[k] * rpx;
      g.fillStyle = f ? colour('coolwarm', (f.cmd[k] + 1) / 2) : '#ddd';
      g.beginPath();
      g.arc(x, y, r, 0, 2 * Math.PI);
      g.fill();
      if (f && f.limit[k] === '1') {
        g.strokeStyle = '#222';
        g.lineWidth = 2.5;
        g.stroke();
      }
    }
    colourBar(c, a.bx, 20, a.s - 100, 'coolwarm', -1, 1, 'stroke (norm.)');
    g.fillStyle = '#ddd';
    g.strokeStyle = '#222';
    g.lineWidth = 2.5;
    g.beginPath();
    g.arc(a.bx + 6, a.s - 50, 5, 0, 2 * Math.PI);
    g.fill();
    g.stroke();
    say(g, a.bx + 16, a.s - 46, 'at a limit');
    if (!f) {
      nothing(c, 'no frame record yet');
      return;
    }
    const lim = (st.tick && st.tick.frame) ? st.tick.frame.at_limit : 0;
    $('cap-command').textContent =
      `${A.x.length} actuators, ${lim} at a limit ` +
      `[${st.setup.limits[0]}, ${st.setup.limits[1]}]; normalised stroke`;
  }

  function drawFlux() {
    const c = prepare('c-flux');
    const a = square(c);
    const g = c.g;
    const f = st.frame;
    const n = st.setup.lenslets.x.length;
    let big = 0;
    if (f) {
      for (let k = 0; k < n; k++) {
        big = Math.max(big, f.flux[k]);
      }
    }
    const top = niceCeil(big > 0 ? big : 1);
    for (let k = 0; k < n; k++) {
      const p = cell(a, k);
      g.fillStyle = f ? colour('viridis', f.flux[k] / top) : '#ddd';
      g.fillRect(p.x - p.side / 2, p.y - p.side / 2, p.side + 0.5,
        p.side + 0.5);
      if (f && f.valid[k] !== '1') {
        g.strokeStyle = '#c0392b';
        g.lineWidth = 1.5;
        g.beginPath();
        g.moveTo(p.x - p.side / 3, p.y - p.side / 3);
        g.lineTo(p.x + p.side / 3, p.y + p.side / 3);
        g.moveTo(p.x - p.side / 3, p.y + p.side / 3);
        g.lineTo(p.x + p.side / 3, p.y - p.side / 3);
        g.stroke();
      }
    }
    pupil(g, a);
    lengthBar(c, a);
    colourBar(c, a.bx, 20, a.s - 30, 'viridis', 0, top, 'counts');
    if (!f) {
      nothing(c, 'no frame record yet');
    } else if (f.flags & 2) {
      nothing(c, 'the driver sends slopes: no flux');
    }
  }

  function plot(g, x, y, w, h, top, label, t0, t1, series) {
    g.lineWidth = 1;
    for (let k = 0; k <= 2; k++) {
      g.strokeStyle = k === 2 ? '#888' : '#e2e2e2';
      g.beginPath();
      g.moveTo(x, y + h * k / 2);
      g.lineTo(x + w, y + h * k / 2);
      g.stroke();
    }
    g.strokeStyle = '#888';
    g.beginPath();
    g.moveTo(x, y);
    g.lineTo(x, y + h);
    g.stroke();
    say(g, x - 4, y + 4, fmt(top, 3), 'right');
    say(g, x - 4, y + h / 2 + 4, fmt(top / 2, 3), 'right');
    say(g, x - 4, y + h + 4, '0', 'right');
    say(g, x + 4, y - 4, label);
    for (const s of series) {
      g.strokeStyle = g.fillStyle = s.colour;
      g.lineWidth = 1.5;
      g.beginPath();
      let pen = false;
      for (const p of st.hist) {
        const v = p[s.index];
        if (v === null || !Number.isFinite(v)) {
          pen = false;
          continue;
        }
        const px = x + (p[0] - t0) / (t1 - t0) * w;
        const py = y + h - Math.min(1, Math.max(0, v / top)) * h;
        if (pen) {
          g.lineTo(px, py);
        } else {
          g.moveTo(px, py);
          g.fillRect(px - 1, py - 1, 2, 2);
        }
        pen = true;
      }
      g.stroke();
    }
  }

  function drawHistory() {
    const c = prepare('c-history');
    const g = c.g;
    if (st.hist.length === 0) {
      nothing(c, 'no history yet');
      return;
    }
    const t1 = st.hist[st.hist.length - 1][0];
    let t0 = st.hist[0][0];
    if (t1 - t0 < 1e-9) {
      t0 = t1 - 1;
    }
    let top = 0;
    for (const p of st.hist) {
      for (const i of [1, 3]) {
        if (p[i] !== null && Number.isFinite(p[i])) {
          top = Math.max(top, p[i]);
        }
      }
    }
    top = niceCeil(top > 0 ? top : 1);
    const x = 48;
    const w = c.w - 60;
    const h = (c.h - 70) / 2;
    const est = getComputedStyle(document.body).getPropertyValue('--accent');
    const tru = getComputedStyle(document.body).getPropertyValue('--truth');
    plot(g, x, 18, w, h, top, 'residual RMS, nm', t0, t1,
      [{ index: 3, colour: tru }, { index: 1, colour: est }]);
    plot(g, x, 42 + h, w, h, 1, 'Strehl ratio', t0, t1,
      [{ index: 4, colour: tru }, { index: 2, colour: est }]);
    say(g, x, c.h - 6, `${fmt(t0 - t1, 3)} s`, 'center');
    say(g, x + w, c.h - 6, 'now', 'center');
  }

  function drawSv() {
    const c = prepare('c-sv');
    const g = c.g;
    const cal = st.calib;
    const sv = cal ? cal.singular_values.filter((v) => v > 0) : [];
    if (sv.length === 0) {
      nothing(c, 'no calibration');
      $('cap-sv').textContent = 'no calibration installed yet';
      return;
    }
    const all = cal.singular_values;
    const n = all.length;
    let lo = Math.floor(Math.log10(Math.min(...sv)));
    let hi = Math.ceil(Math.log10(Math.max(...sv)));
    if (hi - lo < 1) {
      hi = lo + 1;
    }
    const x = 48;
    const y = 10;
    const w = c.w - 60;
    const h = c.h - 34;
    g.lineWidth = 1;
    for (let d = lo; d <= hi; d++) {
      const yy = y + h - (d - lo) / (hi - lo) * h;
      g.strokeStyle = '#e2e2e2';
      g.beginPath();
      g.moveTo(x, yy);
      g.lineTo(x + w, yy);
      g.stroke();
      say(g, x - 4, yy + 4, `1e${d}`, 'right');
    }
    g.strokeStyle = '#888';
    g.strokeRect(x + 0.5, y + 0.5, w, h);
    const marks = [[cal.modes, '#222', 'kept'], [cal.recommended,
      getComputedStyle(document.body).getPropertyValue('--truth'),
      'recommended']];
    marks.forEach(([m, col, name], i) => {
      if (m > 0 && m <= n) {
        const xx = x + (m - 0.5) / n * w;
        const left = xx > x + 0.6 * w;
        g.strokeStyle = col;
        g.beginPath();
        g.moveTo(xx, y);
        g.lineTo(xx, y + h);
        g.stroke();
        say(g, xx + (left ? -3 : 3), y + 12 + 13 * i, `${name} ${m}`,
          left ? 'right' : 'left', col);
      }
    });
    g.fillStyle = getComputedStyle(document.body).getPropertyValue('--accent');
    for (let k = 0; k < n; k++) {
      if (all[k] > 0) {
        const yy = y + h - (Math.log10(all[k]) - lo) / (hi - lo) * h;
        g.beginPath();
        g.arc(x + (k + 0.5) / n * w, yy, 1.8, 0, 2 * Math.PI);
        g.fill();
      }
    }
    say(g, x, c.h - 6, '1', 'center');
    say(g, x + w, c.h - 6, String(n), 'center');
    $('cap-sv').textContent =
      `interaction matrix of the installed calibration, by mode index; ` +
      `condition number ${fmt(cal.condition, 4)}`;
  }

  const UNITS = ['1 \u00b5s', '10 \u00b5s', '100 \u00b5s', '1 ms', '10 ms',
    '100 ms', '1 s'];

  // Bin k: 10^(k/10) <= latency/us < 10^((k+1)/10) (lib/wt_draw.h).
  function drawLatency() {
    const c = prepare('c-latency');
    const g = c.g;
    const L = st.tick && st.tick.latency;
    if (!L || L.n === 0) {
      nothing(c, 'no frame records yet');
      return;
    }
    let lo = L.counts.length;
    let hi = -1;
    let big = 0;
    L.counts.forEach((v, k) => {
      if (v > 0) {
        lo = Math.min(lo, k);
        hi = k;
        big = Math.max(big, v);
      }
    });
    const d0 = Math.floor(lo / 10);
    const d1 = Math.floor(hi / 10) + 1;
    const nb = 10 * (d1 - d0);
    const x = 48;
    const y = 16;
    const w = c.w - 64;
    const h = c.h - 44;
    g.fillStyle = getComputedStyle(document.body).getPropertyValue('--accent');
    for (let k = 10 * d0; k < 10 * d1; k++) {
      const bh = L.counts[k] / big * h;
      if (bh > 0) {
        g.fillRect(x + (k - 10 * d0) / nb * w + 0.5, y + h - bh,
          Math.max(1, w / nb - 1), bh);
      }
    }
    g.strokeStyle = '#888';
    g.lineWidth = 1;
    g.beginPath();
    g.moveTo(x, y);
    g.lineTo(x, y + h);
    g.lineTo(x + w, y + h);
    g.stroke();
    for (let d = d0; d <= d1; d++) {
      const lx = x + (d - d0) / (d1 - d0) * w;
      say(g, lx, y + h + 15, UNITS[d] || '', 'center');
    }
    say(g, x - 4, y + 8, String(big), 'right');
    say(g, x - 4, y + h, '0', 'right');
    say(g, x + 4, y - 4, 'frame records per bin (10 a decade)');
    $('cap-latency').textContent =
      `receive \u2192 send of the last ${L.n} frame records seen: median ` +
      `${fmt(L.median, 3)} \u00b5s, 99% ${fmt(L.p99, 3)} \u00b5s, max ` +
      `${fmt(L.max, 3)} \u00b5s`;
  }

  const FLAG_COLOURS = ['#c0392b', '#e08a00', '#7d3c98', '#1f77b4',
    '#2e8b57', '#8c564b'];

  function drawActuators() {
    const c = prepare('c-actuators');
    const a = square(c);
    const g = c.g;
    const A = st.setup.actuators;
    const fl = st.calib && st.calib.flags;
    const half = a.s / 2;
    const rpx = half / Math.max(1, A.n * A.pitch / 2);
    const r = 0.42 * A.pitch * rpx;
    let flagged = 0;
    g.strokeStyle = '#888';
    g.lineWidth = 1;
    g.beginPath();
    g.arc(a.x + half, a.y + half, rpx, 0, 2 * Math.PI);
    g.stroke();
    for (let k = 0; k < A.x.length; k++) {
      let col = '#ddd';
      if (fl && Array.isArray(fl.act)) {
        for (let b = 0; b < fl.names.length; b++) {
          if (fl.act[k] & (1 << b)) {
            col = FLAG_COLOURS[b % FLAG_COLOURS.length];
            flagged++;
            break;
          }
        }
      }
      g.fillStyle = col;
      g.beginPath();
      g.arc(a.x + half + A.x[k] * rpx, a.y + half + A.y[k] * rpx, r, 0,
        2 * Math.PI);
      g.fill();
    }
    if (!fl) {
      nothing(c, 'no calibration report seen');
      $('cap-actuators').textContent = 'flags come with the daemon\'s ' +
        'calibration report (the calibration event), none seen since ' +
        'the view started';
      return;
    }
    fl.names.forEach((name, b) => {
      g.fillStyle = FLAG_COLOURS[b % FLAG_COLOURS.length];
      g.beginPath();
      g.arc(a.bx + 6, 24 + 18 * b, 5, 0, 2 * Math.PI);
      g.fill();
      say(g, a.bx + 16, 28 + 18 * b, `${name} ${fl.counts[b]}`);
    });
    $('cap-actuators').textContent =
      `${flagged} of ${A.x.length} actuators flagged by the calibration ` +
      `report (weak: response under a quarter of the median)`;
  }

  /* --- text ---------------------------------------------------------------- */

  function setText(id, text) {
    const e = $(id);
    if (e.textContent !== text) {
      e.textContent = text;
    }
  }

  function drawStatus() {
    const t = st.tick;
    const s = t && t.status;
    const f = t && t.frame;
    const badge = $('state');
    const stale = !t || t.status_age_s === null || t.status_age_s > STALE_S;
    const state = s ? s.state : (f ? f.state : 'unknown');
    badge.textContent = stale ? 'no telemetry' : state;
    badge.className = 'badge ' + (stale ? 'offline' : state);
    setText('fault', s && s.fault ? `fault: ${s.fault}` : '');
    const banner = $('banner');
    if (stale) {
      const age = t && t.status_age_s !== null ?
        `for ${fmt(t.status_age_s, 2)} s` : 'yet';
      banner.textContent = `No status from wavetrimd ${age} ` +
        `(telemetry ${st.setup.telemetry}). Is the daemon running?`;
      banner.classList.remove('hidden');
    } else {
      banner.classList.add('hidden');
    }
    if (f) {
      setText('s-frame', String(f.id));
      setText('s-wf', `${fmt(f.rms_nm, 4)} nm / ${fmt(f.strehl, 3)}`);
    }
    if (s) {
      const c = s.counts || {};
      const lat = s.latency_us;
      setText('s-rate', `${fmt(s.frame_rate_hz, 4)} Hz`);
      setText('s-latency', lat ? `${fmt(lat.median, 3)} / ${fmt(lat.max, 3)} \u00b5s` : 'n/a');
      setText('s-rms', `${fmt(s.residual_rms, 3)} px`);
      setText('s-invalid', String(s.invalid_subapertures));
      setText('s-clipped', String(s.clipped_actuators));
      setText('s-dropped', `${c.dropped} / ${c.stale}`);
      setText('s-refused', `${c.refused} / ${c.bad_dimensions}`);
      setText('s-rejected', `${c.rejected_updates} / ${c.send_failed}`);
      setText('s-tmlost', String(c.telemetry_dropped));
      // Counters that are not zero stand out.
      for (const [id, vs] of [['s-dropped', [c.dropped, c.stale]],
        ['s-refused', [c.refused, c.bad_dimensions]],
        ['s-rejected', [c.rejected_updates, c.send_failed]],
        ['s-tmlost', [c.telemetry_dropped]]]) {
        $(id).classList.toggle('alert', vs.some((v) => v > 0));
      }
      setText('s-modes', String(s.modes));
      for (const [id, v] of [['gain', s.gain], ['leak', s.leak]]) {
        const input = $(id);
        if (document.activeElement !== input && !input.dataset.edited &&
            Number.isFinite(v)) {
          input.value = String(v);
        }
      }
    }
    if (t) {
      setText('s-view', `${t.view.records} / ${t.view.bad_records}`);
    }
  }

  function addEvent(e) {
    const li = document.createElement('li');
    const when = document.createElement('span');
    when.className = 'when';
    when.textContent = new Date().toLocaleTimeString();
    li.appendChild(when);
    const rest = Object.assign({}, e);
    delete rest.event;
    delete rest.t_ns;
    li.appendChild(document.createTextNode(
      `${e.event} ${JSON.stringify(rest)}`));
    const list = $('events');
    list.insertBefore(li, list.firstChild);
    while (list.children.length > 50) {
      list.removeChild(list.lastChild);
    }
  }

  /* --- data ---------------------------------------------------------------- */

  function redraw() {
    st.dirty = false;
    drawStatus();
    drawImage();
    drawSlopes();
    drawWavefront();
    drawCommand();
    drawFlux();
    drawHistory();
    drawLatency();
    drawSv();
    drawActuators();
  }

  function schedule() {
    if (!st.dirty) {
      st.dirty = true;
      window.requestAnimationFrame(redraw);
    }
  }

  async function getJson(url) {
    const r = await fetch(url, { cache: 'no-store' });
    if (!r.ok) {
      throw new Error(`${url}: HTTP ${r.status}`);
    }
    return r.json();
  }

  async function refetchHistory() {
    try {
      st.hist = (await getJson('/api/history')).hist;
      schedule();
    } catch (err) {
      console.warn('history', err);
    }
  }

  async function refetchCalibration() {
    try {
      st.calib = await getJson('/api/calibration');
      schedule();
    } catch (err) {
      console.warn('calibration', err);
    }
  }

  function onTick(t) {
    st.ticks++;
    if (st.lastSeq !== null && t.seq !== st.lastSeq + 1) {
      refetchHistory(); // we skipped ticks: take the server's history
    } else if (t.hist) {
      st.hist.push(t.hist);
      if (st.hist.length > HISTORY_MAX) {
        st.hist.shift();
      }
    }
    st.lastSeq = t.seq;
    st.tick = t;
    if (t.frame && t.frame.sx) {
      st.frame = t.frame;
    }
    if (t.image && typeof t.image.b64 === 'string') {
      const bin = atob(t.image.b64);
      const px = new Uint8Array(bin.length);
      for (let k = 0; k < bin.length; k++) {
        px[k] = bin.charCodeAt(k);
      }
      if (px.length === t.image.w * t.image.h) {
        st.image = Object.assign({}, t.image, { px });
        st.images++;
      }
    }
    if (t.calib_seq !== st.calibSeq) {
      st.calibSeq = t.calib_seq;
      refetchCalibration();
    }
    schedule();
  }

  function connect() {
    const es = new EventSource('/api/events');
    es.addEventListener('hello', (e) => {
      st.hist = JSON.parse(e.data).hist;
      st.lastSeq = null;
      schedule();
    });
    es.addEventListener('tick', (e) => onTick(JSON.parse(e.data)));
    es.addEventListener('log', (e) => addEvent(JSON.parse(e.data)));
    es.addEventListener('error', () => {
      const badge = $('state');
      badge.textContent = 'reconnecting';
      badge.className = 'badge offline';
    });
  }

  /* --- controls: every request goes to the daemon through the server ------ */

  async function send(line) {
    const reply = $('reply');
    reply.className = 'reply';
    reply.textContent = `${line} \u2026`;
    try {
      const r = await fetch('/api/control', {
        method: 'POST',
        headers: { 'Content-Type': 'text/plain', 'X-Wavetrim-View': '1' },
        body: line,
      });
      const j = await r.json();
      reply.className = 'reply ' + (j.ok ? 'ok' : 'error');
      reply.textContent = j.ok ? `${line}: ok ${JSON.stringify(j.result)}` :
        `${line}: ${j.error}`;
    } catch (err) {
      reply.className = 'reply error';
      reply.textContent = `${line}: ${err.message}`;
    }
  }

  function wire() {
    for (const b of document.querySelectorAll('[data-request]')) {
      b.addEventListener('click', () => send(b.dataset.request));
    }
    for (const id of ['gain', 'leak']) {
      const input = $(id);
      input.addEventListener('input', () => { input.dataset.edited = '1'; });
      const go = () => {
        delete input.dataset.edited;
        send(`set control.${id} ${input.value.trim()}`);
      };
      $(`set-${id}`).addEventListener('click', go);
      input.addEventListener('keydown', (e) => {
        if (e.key === 'Enter') {
          go();
        }
      });
    }
    window.addEventListener('resize', schedule);
  }

  async function start() {
    st.setup = await getJson('/api/setup');
    st.maps = {
      viridis: decodeMap(st.setup.colormaps.viridis),
      coolwarm: decodeMap(st.setup.colormaps.coolwarm),
    };
    $('config').textContent = `Configuration: ${st.setup.config}.`;
    wire();
    connect();
    schedule();
  }

  start().catch((err) => {
    const banner = $('banner');
    banner.textContent = `The view could not start: ${err.message}`;
    banner.classList.remove('hidden');
  });
})();
