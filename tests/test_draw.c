/*
 * test_draw.c - colour maps, checksums, PNG and SVG output, and the scene's
 * reading of telemetry (lib/wt_draw.h).
 *
 * The PNG and SVG files are checked by Debian's /usr/bin/python3 with its
 * zlib module (CRCs, the zlib stream and its Adler-32) and its XML parser;
 * those cases are skipped when that interpreter is missing.
 */
#include "wt_test.h"

#include <dirent.h>
#include <errno.h>
#include <math.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include "wt_config.h"
#include "wt_draw.h"
#include "wt_image.h"
#include "wt_request.h"

#define PYTHON "/usr/bin/python3"

/* --- helpers -------------------------------------------------------------- */

/* CIELAB L* of an sRGB colour: IEC 61966-2-1 decoding, CIE 15:2004 L*. */
static double lightness(const double rgb[3])
{
	double l[3], y;

	for (int k = 0; k < 3; k++) {
		double c = rgb[k];

		l[k] = c <= 0.04045 ? c / 12.92 : pow((c + 0.055) / 1.055, 2.4);
	}
	y = 0.2126729 * l[0] + 0.7151522 * l[1] + 0.0721750 * l[2];
	return y > 216.0 / 24389 ? 116 * cbrt(y) - 16 : 24389.0 / 27 * y;
}

static char tmpdir[64];

/* Remove the test's temporary folder and what it holds. */
static void tmp_done(void)
{
	DIR *d;
	struct dirent *e;

	if (!tmpdir[0]) {
		return;
	}
	d = opendir(tmpdir);
	while (d && (e = readdir(d)) != NULL) {
		char path[400];

		if (e->d_name[0] == '.') {
			continue;
		}
		snprintf(path, sizeof(path), "%s/%s", tmpdir, e->d_name);
		unlink(path);
	}
	if (d) {
		closedir(d);
	}
	rmdir(tmpdir);
	tmpdir[0] = '\0';
}

static const char *tmp_path(const char *name)
{
	static char buf[4][160];
	static int k;

	if (!tmpdir[0]) {
		snprintf(tmpdir, sizeof(tmpdir), "/tmp/wt_test_draw_XXXXXX");
		assert_non_null(mkdtemp(tmpdir));
	}
	k = (k + 1) % 4;
	snprintf(buf[k], sizeof(buf[k]), "%s/%s", tmpdir, name);
	return buf[k];
}

/*
 * The checker: python3's zlib and xml modules, not our code.
 *   check.py png FILE W H CHANNELS   pixels must be (7x + 13y + 29c) & 255
 *   check.py pngsize FILE W H        any pixels, that size, RGB
 *   check.py svg FILE W H IDS...     well-formed, root <svg> of that
 *                                    size, every embedded PNG well-formed
 *                                    too, a <g id="panel-ID"> for each ID
 *                                    holding drawing elements
 */
static const char checker[] =
	"import base64, struct, sys, zlib\n"
	"import xml.etree.ElementTree as ET\n"
	"def png(data, w=None, h=None, ch=None, pattern=False):\n"
	"    assert data[:8] == b'\\x89PNG\\r\\n\\x1a\\n', 'signature'\n"
	"    pos, idat, seen = 8, b'', []\n"
	"    while pos < len(data):\n"
	"        n, = struct.unpack('>I', data[pos:pos + 4])\n"
	"        kind = data[pos + 4:pos + 8]\n"
	"        body = data[pos + 8:pos + 8 + n]\n"
	"        crc, = struct.unpack('>I', data[pos + 8 + n:pos + 12 + n])\n"
	"        assert zlib.crc32(kind + body) == crc, 'CRC of %r' % kind\n"
	"        seen.append(kind)\n"
	"        if kind == b'IHDR':\n"
	"            W, H, depth, ctype = struct.unpack('>IIBB', body[:10])\n"
	"        if kind == b'IDAT':\n"
	"            idat += body\n"
	"        pos += 12 + n\n"
	"    assert seen[0] == b'IHDR' and seen[-1] == b'IEND', seen\n"
	"    C = {2: 3, 6: 4}[ctype]\n"
	"    assert depth == 8\n"
	"    if w is not None:\n"
	"        assert (W, H, C) == (w, h, ch), (W, H, C)\n"
	"    raw = zlib.decompress(idat)  # checks the Adler-32 too\n"
	"    assert len(raw) == H * (W * C + 1), 'length'\n"
	"    for y in range(H):\n"
	"        row = raw[y * (W * C + 1):(y + 1) * (W * C + 1)]\n"
	"        assert row[0] == 0, 'filter type'\n"
	"        if pattern:\n"
	"            for x in range(W):\n"
	"                for c in range(C):\n"
	"                    v = row[1 + x * C + c]\n"
	"                    assert v == (7 * x + 13 * y + 29 * c) & 255, (x, "
	"y, c)\n"
	"mode, path = sys.argv[1], sys.argv[2]\n"
	"data = open(path, 'rb').read()\n"
	"if mode == 'png':\n"
	"    png(data, *map(int, sys.argv[3:6]), pattern=True)\n"
	"elif mode == 'pngsize':\n"
	"    png(data, int(sys.argv[3]), int(sys.argv[4]), 3)\n"
	"else:\n"
	"    ns = '{http://www.w3.org/2000/svg}'\n"
	"    root = ET.fromstring(data)\n"
	"    assert root.tag == ns + 'svg', root.tag\n"
	"    assert (root.get('width'), root.get('height')) == "
	"tuple(sys.argv[3:5]), (root.get('width'), root.get('height'))\n"
	"    groups = {g.get('id'): g for g in root.iter(ns + 'g')}\n"
	"    for name in sys.argv[5:]:\n"
	"        g = groups.get('panel-' + name)\n"
	"        assert g is not None, 'no panel ' + name\n"
	"        assert len(list(g.iter(ns + 'text'))) >= 2, name\n"
	"        assert len(list(g.iter(ns + 'rect'))) >= 1, name\n"
	"    images = list(root.iter(ns + 'image'))\n"
	"    assert images, 'no embedded image'\n"
	"    for im in images:\n"
	"        href = im.get('href')\n"
	"        assert href.startswith('data:image/png;base64,')\n"
	"        png(base64.b64decode(href.split(',', 1)[1]))\n"
	"    assert len(list(root.iter(ns + 'text'))) > 10\n";

/* Run the checker; returns its exit status, or -1 without python. */
static int run_checker(const char *args)
{
	const char *script = tmp_path("check.py");
	char cmd[1024];
	FILE *f;
	int st;

	if (access(PYTHON, X_OK) != 0) {
		return -1;
	}
	f = fopen(script, "w");
	assert_non_null(f);
	fputs(checker, f);
	fclose(f);
	snprintf(cmd, sizeof(cmd), PYTHON " %s %s", script, args);
	st = system(cmd);
	return WIFEXITED(st) ? WEXITSTATUS(st) : 99;
}

/* A scene for the default configuration (16 x 16 lenslets of 16 pixels of
 * 6.5 um, f = 5.2 mm, 920 nm; 12 x 12 actuators without corners). */
static wt_draw_scene *scene_default(wt_config **cfg_out)
{
	wt_config *cfg;
	wt_draw_scene *s;
	wt_error err = {0};

	assert_int_equal(wt_config_create(&cfg, &err), 0);
	assert_int_equal(wt_draw_scene_create(cfg, &s, &err), 0);
	if (cfg_out) {
		*cfg_out = cfg;
	} else {
		wt_config_destroy(cfg);
	}
	return s;
}

/*
 * A frame record for the wavefront W = a2 Z2 + a4 Z4 (um), with Noll's
 * Z2 = 2 x and Z4 = sqrt(3) (2 r^2 - 1) (Noll 1976): gradients per pupil
 * radius dW/dx = 2 a2 + 4 sqrt(3) a4 x, dW/dy = 4 sqrt(3) a4 y, both linear,
 * so their mean over a square lenslet is the value at its centre.  A
 * Shack-Hartmann spot moves by f times the wavefront slope (common
 * practice): slope in pixels = f_um / pixel_um * (dW/dx per radius) /
 * radius_um, radius_um = lenslets * pixels_per_lenslet * pixel_um / 2.
 */
static uint8_t *record_zernike(const wt_draw_info *in, double a2, double a4,
			       uint64_t id, size_t *len)
{
	const double pixel_um = 6.5, focal_um = 5200;
	const double radius_um = 16 * 16 * pixel_um / 2;
	int n = in->lenslets->n_valid, a = in->actuators->n_valid;
	wt_frame_record h = {0};
	uint8_t *rec;
	float *v;

	*len = wt_frame_record_bytes((size_t)n, (size_t)a);
	rec = calloc(1, *len);
	assert_non_null(rec);
	memcpy(h.magic, WT_FRAME_MAGIC, 4);
	h.version = WT_FRAME_VERSION;
	h.state = WT_STATE_CLOSED;
	h.frame_id = id;
	h.recv_ns = 1000000000ull * id;
	h.send_ns = h.recv_ns + 25000;
	h.n_subaps = (uint32_t)n;
	h.n_act = (uint32_t)a;
	memcpy(rec, &h, sizeof(h));
	v = malloc(sizeof(float) * (size_t)(3 * n + a));
	assert_non_null(v);
	for (int k = 0; k < n; k++) {
		double x = in->lenslets->x[k], y = in->lenslets->y[k];
		double gx = 2 * a2 + 4 * sqrt(3) * a4 * x;
		double gy = 4 * sqrt(3) * a4 * y;

		v[k] = (float)(focal_um / pixel_um * gx / radius_um);
		v[n + k] = (float)(focal_um / pixel_um * gy / radius_um);
		v[2 * n + k] = 1000;
	}
	for (int k = 0; k < a; k++) {
		v[3 * n + k] = (float)(k % 5 == 0 ? 1 : 0.1 * (k % 3));
	}
	memcpy(rec + WT_FRAME_HEADER_BYTES, v,
	       sizeof(float) * (size_t)(3 * n + a));
	free(v);
	return rec;
}

static int event(wt_draw_scene *s, const char *json)
{
	return wt_draw_scene_event(s, json, strlen(json));
}

static void set_flux(uint8_t *rec, const wt_draw_info *in, int k, float flux)
{
	size_t n = (size_t)in->lenslets->n_valid;

	memcpy(rec + WT_FRAME_HEADER_BYTES + 8 * n + 4 * (size_t)k, &flux,
	       sizeof(flux));
}

static void set_slope(uint8_t *rec, int k, float sx)
{
	memcpy(rec + WT_FRAME_HEADER_BYTES + 4 * (size_t)k, &sx, sizeof(sx));
}

/* --- checksums ------------------------------------------------------------ */

static void crc32_gives_the_standard_check_value(void **state)
{
	(void)state;
	/* CRC-32 check value of "123456789": 0xCBF43926 (ISO 3309 / the PNG
	 * specification's CRC, the standard check value of the catalogue of
	 * CRC parameters). */
	assert_int_equal(wt_draw_crc32(0, "123456789", 9), 0xCBF43926u);
	/* Continuing a CRC equals computing it at once (the PNG spec's
	 * update_crc usage). */
	assert_int_equal(wt_draw_crc32(wt_draw_crc32(0, "1234", 4), "56789", 5),
			 0xCBF43926u);
	assert_int_equal(wt_draw_crc32(0, "", 0), 0);
}

static void adler32_gives_the_known_value(void **state)
{
	uint8_t big[70000];
	uint32_t a = 1, b = 0;

	(void)state;
	/* Adler-32 of "Wikipedia" is 0x11E60398 (RFC 1950's definition; the
	 * known worked example, from memory). */
	assert_int_equal(wt_draw_adler32(1, "Wikipedia", 9), 0x11E60398u);
	assert_int_equal(wt_draw_adler32(1, "", 0), 1);
	/* Past the 5552-byte blocks: against RFC 1950's definition, summed
	 * here term by term (a = 1 + sum of bytes, b = sum of the a's, both
	 * mod 65521). */
	for (size_t k = 0; k < sizeof(big); k++) {
		big[k] = (uint8_t)(255 - k % 7);
		a = (a + big[k]) % 65521;
		b = (b + a) % 65521;
	}
	assert_int_equal(wt_draw_adler32(1, big, sizeof(big)), b << 16 | a);
}

/* --- colour maps ---------------------------------------------------------- */

static void viridis_matches_the_published_table(void **state)
{
	/* Entries 0, 64, 128, 192, 255 of the published viridis table (van der
	 * Walt & Smith, SciPy 2015; matplotlib's _cm_listed.py). */
	static const struct {
		int k;
		double rgb[3];
	} ref[] = {
		{0, {0.267004, 0.004874, 0.329415}},
		{64, {0.229739, 0.322361, 0.545706}},
		{128, {0.127568, 0.566949, 0.550556}},
		{192, {0.369214, 0.788888, 0.382914}},
		{255, {0.993248, 0.906157, 0.143936}},
	};
	uint8_t table[WT_CMAP_SIZE][3];

	(void)state;
	wt_draw_cmap_table(WT_CMAP_VIRIDIS, table);
	for (size_t i = 0; i < sizeof(ref) / sizeof(ref[0]); i++) {
		double rgb[3];

		wt_draw_cmap(WT_CMAP_VIRIDIS, ref[i].k / 255.0, rgb);
		for (int c = 0; c < 3; c++) {
			assert_float_equal(rgb[c], ref[i].rgb[c], 1e-9);
			assert_int_equal(table[ref[i].k][c],
					 (int)lround(ref[i].rgb[c] * 255));
		}
	}
	/* Clamped outside [0, 1]. */
	{
		double lo[3], hi[3];

		wt_draw_cmap(WT_CMAP_VIRIDIS, -3, lo);
		wt_draw_cmap(WT_CMAP_VIRIDIS, 7, hi);
		assert_float_equal(lo[0], 0.267004, 1e-9);
		assert_float_equal(hi[2], 0.143936, 1e-9);
	}
}

static void viridis_lightness_rises_monotonically(void **state)
{
	double prev = -1, first = 0, last = 0;

	(void)state;
	/* The design goal of viridis (van der Walt & Smith 2015): lightness
	 * increases monotonically and almost linearly from end to end.  L* by
	 * IEC 61966-2-1 and CIE 15 (computed here, not by the library). */
	for (int k = 0; k < WT_CMAP_SIZE; k++) {
		double rgb[3], l;

		wt_draw_cmap(WT_CMAP_VIRIDIS, k / 255.0, rgb);
		l = lightness(rgb);
		if (k > 0) {
			assert_true(l > prev);
			/* Uniform steps: within a factor 1.5 of the mean. */
			assert_true(l - prev > 0.22 && l - prev < 0.45);
		} else {
			first = l;
		}
		prev = l;
		last = l;
	}
	/* Dark blue-violet to bright yellow: L* about 15 to 91 (from the
	 * table's end points with the formula above; common practice). */
	assert_float_equal(first, 14.9, 0.5);
	assert_float_equal(last, 90.9, 0.5);
}

static void coolwarm_matches_moreland(void **state)
{
	/* Moreland, "Diverging Color Maps for Scientific Visualization" (ISVC
	 * 2009): the cool-warm map's published 33-entry table, 8-bit sRGB at
	 * t = k / 32; entries 0-4, the white midpoint 16 and the end 32. */
	static const struct {
		int k;
		int rgb[3];
	} ref[] = {
		{0, {59, 76, 192}},  {1, {68, 90, 204}},  {2, {77, 104, 215}},
		{3, {87, 117, 225}}, {4, {98, 130, 234}}, {16, {221, 221, 221}},
		{32, {180, 4, 38}},
	};
	double peak = 0;

	(void)state;
	for (size_t i = 0; i < sizeof(ref) / sizeof(ref[0]); i++) {
		double rgb[3];

		wt_draw_cmap(WT_CMAP_COOLWARM, ref[i].k / 32.0, rgb);
		for (int c = 0; c < 3; c++) {
			assert_true(abs((int)lround(rgb[c] * 255) -
					ref[i].rgb[c]) <= 2);
		}
	}
	/* The paper's design: lightness rises to the unsaturated middle and
	 * falls after it; both halves nearly mirror each other. */
	for (int k = 1; k < WT_CMAP_SIZE; k++) {
		double a[3], b[3];

		wt_draw_cmap(WT_CMAP_COOLWARM, (k - 1) / 255.0, a);
		wt_draw_cmap(WT_CMAP_COOLWARM, k / 255.0, b);
		if (k <= 127) {
			assert_true(lightness(b) > lightness(a));
		} else if (k >= 129) {
			assert_true(lightness(b) < lightness(a));
		}
		peak = fmax(peak, lightness(b));
	}
	{
		double lo[3], hi[3];

		wt_draw_cmap(WT_CMAP_COOLWARM, 0, lo);
		wt_draw_cmap(WT_CMAP_COOLWARM, 1, hi);
		assert_float_equal(lightness(lo), lightness(hi), 3);
		assert_true(peak > 85);
	}
}

/* --- PNG and SVG ---------------------------------------------------------- */

static void png_decodes_with_zlib(void **state)
{
	static const int sizes[][3] = {{5, 3, 3}, {7, 4, 4}, {300, 200, 3}};
	char args[512];

	(void)state;
	if (access(PYTHON, X_OK) != 0) {
		skip();
	}
	/* 300 x 200 RGB: 180200 bytes of rows, more than two stored blocks of
	 * 65535 (RFC 1951 section 3.2.4). */
	for (size_t i = 0; i < sizeof(sizes) / sizeof(sizes[0]); i++) {
		int w = sizes[i][0], h = sizes[i][1], c = sizes[i][2];
		uint8_t *px = malloc((size_t)(w * h * c));
		const char *path = tmp_path("t.png");
		wt_error err = {0};

		assert_non_null(px);
		for (int y = 0; y < h; y++) {
			for (int x = 0; x < w; x++) {
				for (int k = 0; k < c; k++) {
					px[(y * w + x) * c + k] =
						(uint8_t)((7 * x + 13 * y +
							   29 * k) &
							  255);
				}
			}
		}
		assert_int_equal(wt_draw_png_write(px, w, h, c, path, &err), 0);
		free(px);
		snprintf(args, sizeof(args), "png %s %d %d %d", path, w, h, c);
		/* Decoded by python3's zlib (CRC-32 and Adler-32 checked). */
		assert_int_equal(run_checker(args), 0);
	}
	tmp_done();
}

static void png_refuses_bad_sizes(void **state)
{
	uint8_t px[12] = {0}, *out = NULL;
	size_t len;

	(void)state;
	assert_int_equal(wt_draw_png_encode(px, 0, 1, 3, &out, &len, NULL),
			 -EINVAL);
	assert_int_equal(wt_draw_png_encode(px, 2, 2, 2, &out, &len, NULL),
			 -EINVAL);
	assert_null(out);
}

/* Whether the file at path holds the text what. */
static bool file_has(const char *path, const char *what)
{
	FILE *f = fopen(path, "rb");
	static char buf[1 << 22];
	size_t n;

	assert_non_null(f);
	n = fread(buf, 1, sizeof(buf) - 1, f);
	fclose(f);
	buf[n] = '\0';
	return strstr(buf, what) != NULL;
}

/* The panels every snapshot must hold (the ids of wt_draw.h). */
static const char panel_ids[] =
	"image slopes wavefront command history latency sv actuators";

static void snapshot_writes_png_and_svg(void **state)
{
	wt_config *cfg;
	wt_draw_scene *s = scene_default(&cfg);
	const wt_draw_info *in = wt_draw_scene_info(s);
	const char *status =
		"{\"ok\":true,\"result\":{\"state\":\"closed\",\"fault\":null,"
		"\"frame_rate_hz\":500,\"latency_us\":{\"median\":40,\"max\":"
		"90},"
		"\"gain\":0.3,\"leak\":0.01,\"modes\":100,\"counts\":{},"
		"\"calibration\":{\"recommended\":96,\"condition\":50,"
		"\"singular_values\":[10,5,2,1,0.5,0.2]}}}";
	uint8_t *recs, *one;
	size_t len;
	char args[512];
	wt_error err = {0};

	(void)state;
	one = record_zernike(in, 0.05, 0.02, 1, &len);
	{
		size_t bytes = 0;

		assert_int_equal(wt_draw_record_size(cfg, &bytes, &err), 0);
		assert_int_equal(bytes, len);
	}
	recs = malloc(3 * len);
	assert_non_null(recs);
	for (int k = 0; k < 3; k++) {
		memcpy(recs + k * len, one, len);
		recs[k * len + 8] = (uint8_t)(k + 1); /* frame id */
	}
	wt_draw_scene_destroy(s);
	assert_int_equal(wt_draw_snapshot(cfg, status, recs, 3 * len,
					  tmp_path("snap.png"), &err),
			 0);
	{
		/* A 256 x 256 sensor image (16 x 16 lenslets of 16 px). */
		static uint16_t pix[256 * 256];
		static uint8_t image[WT_IMAGE_BYTES_MAX];
		int n;

		for (int k = 0; k < 256 * 256; k++) {
			pix[k] = (uint16_t)(k % 16 == 8 && k / 256 % 16 == 8
						    ? 900
						    : 5);
		}
		n = wt_image_encode(pix, 256, 256, 3, 0, 2, image,
				    sizeof(image));
		assert_int_equal(n, 48 + 2 * 128 * 128);
		assert_int_equal(wt_draw_snapshot_image(
					 cfg, status, recs, 3 * len, image,
					 (size_t)n, tmp_path("snap.svg"), &err),
				 0);
		assert_int_equal(wt_draw_snapshot_image(
					 cfg, status, recs, 3 * len, image,
					 (size_t)n, tmp_path("snap.png"), &err),
				 0);
		/* An image of another sensor is refused. */
		n = wt_image_encode(pix, 128, 128, 3, 0, 2, image,
				    sizeof(image));
		assert_int_equal(wt_draw_snapshot_image(
					 cfg, status, recs, 3 * len, image,
					 (size_t)n, tmp_path("bad.svg"), &err),
				 -EPROTO);
		assert_non_null(strstr(err.msg, "sensor"));
	}
	assert_true(file_has(tmp_path("snap.svg"), ">Sensor image<"));
	assert_true(file_has(tmp_path("snap.svg"), ">Latency and counters<"));
	/* No records: the panels empty, still a picture. */
	assert_int_equal(wt_draw_snapshot(cfg, NULL, NULL, 0,
					  tmp_path("empty.svg"), &err),
			 0);
	/* Without an image the flux per subaperture stands in. */
	assert_true(file_has(tmp_path("empty.svg"), ">Flux per subaperture<"));
	assert_int_equal(wt_draw_snapshot(cfg, status, recs, 3 * len,
					  tmp_path("snap.jpg"), &err),
			 -EINVAL);
	assert_int_equal(wt_draw_snapshot(cfg, status, recs, 3 * len - 1,
					  tmp_path("snap.png"), &err),
			 -EINVAL);
	free(one);
	free(recs);
	wt_config_destroy(cfg);
	if (access(PYTHON, X_OK) != 0) {
		tmp_done();
		skip();
	}
	snprintf(args, sizeof(args), "pngsize %s %d %d", tmp_path("snap.png"),
		 WT_DRAW_WIDTH, WT_DRAW_HEIGHT);
	assert_int_equal(run_checker(args), 0);
	/* Well-formed XML with an <svg> root and every panel's group, by
	 * python3's XML parser. */
	for (int k = 0; k < 2; k++) {
		snprintf(args, sizeof(args), "svg %s %d %d %s",
			 tmp_path(k ? "empty.svg" : "snap.svg"), WT_DRAW_WIDTH,
			 WT_DRAW_HEIGHT, panel_ids);
		assert_int_equal(run_checker(args), 0);
	}
	tmp_done();
}

/* --- the scene
 * ---------------------------------------------------------------- */

static void scene_fit_recovers_tilt_and_defocus(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);
	const double a2 = 0.1, a4 = 0.05; /* um RMS */
	double sigma_nm = 1000 * sqrt(a2 * a2 + a4 * a4);
	size_t len;
	uint8_t *rec = record_zernike(in, a2, a4, 7, &len);
	float map[16 * 16];
	double big;

	(void)state;
	assert_int_equal(wt_draw_scene_frame(s, rec, len, NULL), 0);
	assert_true(in->fit_ok);
	assert_int_equal(in->j_first, 2);
	/* Noll's modes are orthonormal on the disk, so the coefficients are
	 * the RMS contributions (Noll 1976); slopes carry float rounding. */
	assert_float_equal(in->coef_um[0], a2, 1e-6);
	assert_float_equal(in->coef_um[1], 0, 1e-6);
	assert_float_equal(in->coef_um[2], a4, 1e-6);
	for (int c = 3; c < in->n_modes; c++) {
		assert_float_equal(in->coef_um[c], 0, 1e-6);
	}
	assert_float_equal(in->rms_nm, sigma_nm, 1e-3);
	/* Marechal: S = exp(-(2 pi sigma / lambda)^2), lambda 920 nm. */
	assert_float_equal(in->strehl, exp(-pow(2 * M_PI * sigma_nm / 920, 2)),
			   1e-6);
	assert_float_equal(in->latency_us, 25, 1e-9);
	assert_int_equal(in->frame_id, 7);
	/* The map: W at the sample centres, NaN outside the unit disk. */
	assert_int_equal(wt_draw_scene_map(s, 16, false, map, &big), 0);
	for (int j = 0; j < 16; j++) {
		for (int i = 0; i < 16; i++) {
			double x = -1 + (2 * i + 1) / 16.0;
			double y = -1 + (2 * j + 1) / 16.0;
			double w = 1000 *
				   (a2 * 2 * x +
				    a4 * sqrt(3) * (2 * (x * x + y * y) - 1));

			if (x * x + y * y > 1) {
				assert_true(isnan(map[j * 16 + i]));
			} else {
				assert_float_equal(map[j * 16 + i], w, 1e-2);
			}
		}
	}
	free(rec);
	wt_draw_scene_destroy(s);
}

static void scene_leaves_out_invalid_subapertures(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);
	size_t len;
	uint8_t *rec = record_zernike(in, 0.0, 0.08, 3, &len);
	uint32_t n_invalid = 4;

	(void)state;
	/* Four subapertures under min_flux (100 by default) with garbage
	 * slopes: the record says 4 are invalid; they must not count. */
	for (int k = 0; k < 4; k++) {
		set_flux(rec, in, 10 * k, 5);
		set_slope(rec, 10 * k, 3.0f);
	}
	memcpy(rec + offsetof(wt_frame_record, n_invalid), &n_invalid, 4);
	assert_int_equal(wt_draw_scene_frame(s, rec, len, NULL), 0);
	for (int k = 0; k < 4; k++) {
		assert_int_equal(in->valid[10 * k], 0);
	}
	assert_int_equal(in->valid[1], 1);
	assert_float_equal(in->rms_nm, 80, 1e-3);
	/* A live change of the threshold (a "config" event) moves the line. */
	assert_int_equal(event(s, "{\"event\":\"config\",\"t_ns\":1,"
				  "\"frame\":2,\"key\":\"sensor.min_flux\","
				  "\"value\":2}"),
			 0);
	assert_int_equal(wt_draw_scene_frame(s, rec, len, NULL), 0);
	assert_int_equal(in->valid[0], 1);
	free(rec);
	wt_draw_scene_destroy(s);
}

static void scene_refuses_foreign_records(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);
	size_t len;
	uint8_t *rec = record_zernike(in, 0.1, 0, 1, &len);
	uint32_t wrong = 5;
	wt_error err = {0};

	(void)state;
	assert_int_equal(wt_draw_scene_frame(s, rec, len - 4, &err), -EPROTO);
	assert_int_equal(wt_draw_scene_frame(s, rec, 10, &err), -EPROTO);
	rec[0] = 'X';
	assert_int_equal(wt_draw_scene_frame(s, rec, len, &err), -EPROTO);
	rec[0] = 'W';
	memcpy(rec + offsetof(wt_frame_record, n_subaps), &wrong, 4);
	assert_int_equal(wt_draw_scene_frame(s, rec, len, &err), -EPROTO);
	assert_non_null(strstr(err.msg, "geometry"));
	assert_false(in->have_frame);
	assert_int_equal(in->bad_records, 4);
	assert_int_equal(in->records, 0);
	free(rec);
	wt_draw_scene_destroy(s);
}

static void scene_reads_status_and_events(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);
	const char *reply =
		"{\"ok\":true,\"result\":{\"state\":\"held\",\"fault\":null,"
		"\"frame_rate_hz\":812.5,\"latency_us\":{\"median\":33,"
		"\"max\":120},\"residual_rms\":0.02,\"frames\":99,"
		"\"gain\":0.4,\"leak\":0.02,\"modes\":2,\"counts\":{"
		"\"dropped\":7,\"refused\":3,\"stale\":1},"
		"\"calibration\":{\"recommended\":3,\"condition\":4,"
		"\"singular_values\":[4,2,1]}}}";
	const char *telemetry = "{\"state\":\"fault\",\"fault\":"
				"\"driver silent\",\"latency_us\":null,"
				"\"counts\":{\"dropped\":8}}";
	wt_error err = {0};

	(void)state;
	assert_int_equal(wt_draw_scene_status(s, reply, strlen(reply), &err),
			 0);
	assert_string_equal(in->status.state, "held");
	assert_string_equal(in->status.fault, "");
	assert_float_equal(in->status.frame_rate_hz, 812.5, 0);
	assert_float_equal(in->status.latency_max_us, 120, 0);
	assert_int_equal(in->status.dropped, 7);
	assert_int_equal(in->status.refused, 3);
	assert_int_equal(in->status.modes, 2);
	assert_int_equal(in->status.recommended, 3);
	assert_int_equal(in->n_sv, 3);
	assert_float_equal(in->sv[2], 1, 0);
	/* Telemetry status: no singular values, which stay as they were. */
	assert_int_equal(
		wt_draw_scene_status(s, telemetry, strlen(telemetry), &err), 0);
	assert_string_equal(in->status.state, "fault");
	assert_string_equal(in->status.fault, "driver silent");
	assert_true(isnan(in->status.latency_median_us));
	assert_int_equal(in->n_sv, 3);
	/* Not a status object. */
	assert_int_equal(wt_draw_scene_status(s, "[1,2]", 5, &err), -EINVAL);
	assert_int_equal(wt_draw_scene_status(s, "{\"state\"", 8, &err),
			 -EINVAL);
	/* A calibration event brings new singular values. */
	assert_int_equal(event(s, "{\"event\":\"calibration\",\"t_ns\":5,"
				  "\"frame\":1,\"modes\":2,\"recommended\":2,"
				  "\"condition\":9,\"singular_values\":"
				  "[9,3,1,0.5],\"weak_actuators\":[]}"),
			 0);
	assert_int_equal(in->n_sv, 4);
	assert_float_equal(in->status.condition, 9, 0);
	assert_int_equal(event(s, "nope"), -EINVAL);
	assert_int_equal(event(s, "{\"t_ns\":1}"), -EINVAL);
	wt_draw_scene_destroy(s);
}

static void scene_reads_actuator_flags(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);

	(void)state;
	assert_false(in->have_flags);
	/* The report of section 4: weak_actuators; a fuller report's members
	 * of other shapes are ignored, out-of-range indices too. */
	assert_int_equal(event(s, "{\"event\":\"calibration\",\"t_ns\":5,"
				  "\"frame\":1,\"weak_actuators\":[3,7,7,"
				  "-1,1000,2.5,\"x\"],\"swapped_actuators\":"
				  "[[1,2]],\"dead_actuators\":[0],"
				  "\"actuators\":{\"norms\":[1,2]},"
				  "\"future\":{\"weak_actuators\":[9]}}"),
			 0);
	assert_true(in->have_flags);
	assert_int_equal(in->n_flag_kinds, 3);
	assert_string_equal(in->flag_names[0], "weak");
	assert_int_equal(in->flag_counts[0], 2);
	assert_string_equal(in->flag_names[1], "swapped");
	assert_int_equal(in->flag_counts[1], 0);
	assert_string_equal(in->flag_names[2], "dead");
	assert_int_equal(in->flag_counts[2], 1);
	assert_int_equal(in->act_flags[3], 1);
	assert_int_equal(in->act_flags[7], 1);
	assert_int_equal(in->act_flags[0], 4);
	assert_int_equal(in->act_flags[9], 0);
	/* A report with no flag members leaves them; a new one replaces. */
	assert_int_equal(event(s, "{\"event\":\"calibration\",\"t_ns\":6,"
				  "\"frame\":2,\"modes\":3}"),
			 0);
	assert_int_equal(in->n_flag_kinds, 3);
	assert_int_equal(event(s, "{\"event\":\"calibration\",\"t_ns\":7,"
				  "\"frame\":3,\"weak_actuators\":[]}"),
			 0);
	assert_int_equal(in->n_flag_kinds, 1);
	assert_int_equal(in->flag_counts[0], 0);
	assert_int_equal(in->act_flags[3], 0);
	assert_int_equal(in->act_flags[0], 0);
	wt_draw_scene_destroy(s);
}

static void latency_histogram_bins_by_tenth_decades(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);
	static const double us[] = {25, 25, 40, 1000, 0.2, 5e6, 99};
	size_t len;
	uint8_t *rec = record_zernike(in, 0, 0, 1, &len);
	wt_frame_record h;

	(void)state;
	memcpy(&h, rec, sizeof(h));
	for (size_t k = 0; k < sizeof(us) / sizeof(us[0]); k++) {
		h.send_ns = h.recv_ns + (uint64_t)llround(us[k] * 1000);
		memcpy(rec, &h, sizeof(h));
		wt_draw_scene_timing(s, rec, len);
	}
	/* Ignored: a header too short, a foreign magic, send before
	 * receive. */
	wt_draw_scene_timing(s, rec, WT_FRAME_HEADER_BYTES - 1);
	h.send_ns = h.recv_ns - 1;
	memcpy(rec, &h, sizeof(h));
	wt_draw_scene_timing(s, rec, len);
	rec[0] = 'X';
	wt_draw_scene_timing(s, rec, len);
	wt_draw_scene_sample(s, 1);
	assert_int_equal(in->lat_n, 7);
	/* Bin floor(10 log10(us)) (by hand): 25 us -> 13, 40 -> 16,
	 * 1000 -> 30, 99 -> 19; under 1 us -> 0; 5 s -> the last. */
	assert_int_equal(in->lat_counts[13], 2);
	assert_int_equal(in->lat_counts[16], 1);
	assert_int_equal(in->lat_counts[30], 1);
	assert_int_equal(in->lat_counts[19], 1);
	assert_int_equal(in->lat_counts[0], 1);
	assert_int_equal(in->lat_counts[WT_DRAW_LAT_BINS - 1], 1);
	/* Sorted: 0.2 25 25 40 99 1000 5e6: median 40, nearest-rank 99th
	 * percentile ceil(6.93) = 7th = 5e6, max 5e6. */
	assert_float_equal(in->lat_median_us, 40, 1e-9);
	assert_float_equal(in->lat_p99_us, 5e6, 1e-6);
	assert_float_equal(in->lat_max_us, 5e6, 1e-6);
	/* The window keeps the newest WT_DRAW_LAT_WINDOW. */
	rec[0] = 'W';
	h.send_ns = h.recv_ns + 50000; /* 50 us: bin 16 */
	memcpy(rec, &h, sizeof(h));
	for (int k = 0; k < WT_DRAW_LAT_WINDOW; k++) {
		wt_draw_scene_timing(s, rec, len);
	}
	assert_int_equal(in->lat_n, WT_DRAW_LAT_WINDOW);
	assert_int_equal(in->lat_counts[16], WT_DRAW_LAT_WINDOW);
	assert_int_equal(in->lat_counts[13], 0);
	free(rec);
	wt_draw_scene_destroy(s);
}

static void scene_marks_actuators_at_a_limit(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);
	size_t len;
	uint8_t *rec = record_zernike(in, 0.1, 0, 1, &len);
	int expect = 0;

	(void)state;
	/* Commands: 1 for every fifth actuator, 0 .. 0.2 otherwise. */
	assert_int_equal(wt_draw_scene_frame(s, rec, len, NULL), 0);
	for (int k = 0; k < in->actuators->n_valid; k++) {
		assert_int_equal(in->at_limit[k], k % 5 == 0);
		expect += k % 5 == 0;
	}
	assert_int_equal(in->n_at_limit, expect);
	/* mirror.limit_high lowered to 0.15 at run time. */
	assert_int_equal(event(s, "{\"event\":\"config\",\"t_ns\":1,"
				  "\"frame\":2,\"key\":\"mirror.limit_high\","
				  "\"value\":0.15}"),
			 0);
	assert_int_equal(wt_draw_scene_frame(s, rec, len, NULL), 0);
	for (int k = 0; k < in->actuators->n_valid; k++) {
		assert_int_equal(in->at_limit[k], k % 5 == 0 || k % 3 == 2);
	}
	free(rec);
	wt_draw_scene_destroy(s);
}

static void history_keeps_the_newest_points(void **state)
{
	wt_draw_scene *s = scene_default(NULL);
	const wt_draw_info *in = wt_draw_scene_info(s);
	size_t len;
	uint8_t *rec = record_zernike(in, 0.1, 0, 1, &len);

	(void)state;
	wt_draw_scene_sample(s, 0);
	assert_int_equal(in->n_hist, 1);
	assert_true(isnan(in->hist[0].rms_nm));
	assert_int_equal(wt_draw_scene_frame(s, rec, len, NULL), 0);
	wt_draw_scene_truth(s, 1, 123, 0.5);
	for (int k = 1; k <= WT_DRAW_HISTORY_MAX + 50; k++) {
		wt_draw_scene_sample(s, k);
	}
	assert_int_equal(in->n_hist, WT_DRAW_HISTORY_MAX);
	assert_float_equal(in->hist[in->n_hist - 1].t_s,
			   WT_DRAW_HISTORY_MAX + 50, 0);
	assert_float_equal(in->hist[0].t_s, 51, 0);
	/* Long after the last frame and truth: no values, not stale ones. */
	assert_true(isnan(in->hist[in->n_hist - 1].rms_nm));
	assert_true(isnan(in->hist[in->n_hist - 1].truth_rms_nm));
	free(rec);
	wt_draw_scene_destroy(s);
}

const struct CMUnitTest tests[] = {
	cmocka_unit_test(crc32_gives_the_standard_check_value),
	cmocka_unit_test(adler32_gives_the_known_value),
	cmocka_unit_test(viridis_matches_the_published_table),
	cmocka_unit_test(viridis_lightness_rises_monotonically),
	cmocka_unit_test(coolwarm_matches_moreland),
	cmocka_unit_test(png_decodes_with_zlib),
	cmocka_unit_test(png_refuses_bad_sizes),
	cmocka_unit_test(snapshot_writes_png_and_svg),
	cmocka_unit_test(scene_fit_recovers_tilt_and_defocus),
	cmocka_unit_test(scene_leaves_out_invalid_subapertures),
	cmocka_unit_test(scene_refuses_foreign_records),
	cmocka_unit_test(scene_reads_status_and_events),
	cmocka_unit_test(scene_marks_actuators_at_a_limit),
	cmocka_unit_test(scene_reads_actuator_flags),
	cmocka_unit_test(latency_histogram_bins_by_tenth_decades),
	cmocka_unit_test(history_keeps_the_newest_points),
};
WT_TEST_MAIN(tests)
