/*
 * wt_draw.c - colour maps, PNG and SVG output, and the panels of the view.
 *
 * Drawing goes through a small canvas interface (rectangles, lines, discs,
 * rings, text, images) with two implementations: an 8-bit RGB raster with
 * anti-aliased shapes and a 5 x 7 bitmap font (PNG), and SVG text.  Every
 * panel is written once against that interface.
 */
#include "wt_draw.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "wt_image.h"
#include "wt_jsonparse.h"
#include "wt_request.h"
#include "wt_zernike.h"

#define container_of(ptr, type, member)                                        \
	((type *)((char *)(ptr)-offsetof(type, member)))

/* --- colour maps ---------------------------------------------------------- */

/*
 * Viridis, 256 entries of sRGB in [0, 1]: van der Walt & Smith, SciPy 2015;
 * the published table (matplotlib's _cm_listed.py, CC0).
 */
static const double viridis[WT_CMAP_SIZE][3] = {
	{0.267004, 0.004874, 0.329415}, {0.268510, 0.009605, 0.335427},
	{0.269944, 0.014625, 0.341379}, {0.271305, 0.019942, 0.347269},
	{0.272594, 0.025563, 0.353093}, {0.273809, 0.031497, 0.358853},
	{0.274952, 0.037752, 0.364543}, {0.276022, 0.044167, 0.370164},
	{0.277018, 0.050344, 0.375715}, {0.277941, 0.056324, 0.381191},
	{0.278791, 0.062145, 0.386592}, {0.279566, 0.067836, 0.391917},
	{0.280267, 0.073417, 0.397163}, {0.280894, 0.078907, 0.402329},
	{0.281446, 0.084320, 0.407414}, {0.281924, 0.089666, 0.412415},
	{0.282327, 0.094955, 0.417331}, {0.282656, 0.100196, 0.422160},
	{0.282910, 0.105393, 0.426902}, {0.283091, 0.110553, 0.431554},
	{0.283197, 0.115680, 0.436115}, {0.283229, 0.120777, 0.440584},
	{0.283187, 0.125848, 0.444960}, {0.283072, 0.130895, 0.449241},
	{0.282884, 0.135920, 0.453427}, {0.282623, 0.140926, 0.457517},
	{0.282290, 0.145912, 0.461510}, {0.281887, 0.150881, 0.465405},
	{0.281412, 0.155834, 0.469201}, {0.280868, 0.160771, 0.472899},
	{0.280255, 0.165693, 0.476498}, {0.279574, 0.170599, 0.479997},
	{0.278826, 0.175490, 0.483397}, {0.278012, 0.180367, 0.486697},
	{0.277134, 0.185228, 0.489898}, {0.276194, 0.190074, 0.493001},
	{0.275191, 0.194905, 0.496005}, {0.274128, 0.199721, 0.498911},
	{0.273006, 0.204520, 0.501721}, {0.271828, 0.209303, 0.504434},
	{0.270595, 0.214069, 0.507052}, {0.269308, 0.218818, 0.509577},
	{0.267968, 0.223549, 0.512008}, {0.266580, 0.228262, 0.514349},
	{0.265145, 0.232956, 0.516599}, {0.263663, 0.237631, 0.518762},
	{0.262138, 0.242286, 0.520837}, {0.260571, 0.246922, 0.522828},
	{0.258965, 0.251537, 0.524736}, {0.257322, 0.256130, 0.526563},
	{0.255645, 0.260703, 0.528312}, {0.253935, 0.265254, 0.529983},
	{0.252194, 0.269783, 0.531579}, {0.250425, 0.274290, 0.533103},
	{0.248629, 0.278775, 0.534556}, {0.246811, 0.283237, 0.535941},
	{0.244972, 0.287675, 0.537260}, {0.243113, 0.292092, 0.538516},
	{0.241237, 0.296485, 0.539709}, {0.239346, 0.300855, 0.540844},
	{0.237441, 0.305202, 0.541921}, {0.235526, 0.309527, 0.542944},
	{0.233603, 0.313828, 0.543914}, {0.231674, 0.318106, 0.544834},
	{0.229739, 0.322361, 0.545706}, {0.227802, 0.326594, 0.546532},
	{0.225863, 0.330805, 0.547314}, {0.223925, 0.334994, 0.548053},
	{0.221989, 0.339161, 0.548752}, {0.220057, 0.343307, 0.549413},
	{0.218130, 0.347432, 0.550038}, {0.216210, 0.351535, 0.550627},
	{0.214298, 0.355619, 0.551184}, {0.212395, 0.359683, 0.551710},
	{0.210503, 0.363727, 0.552206}, {0.208623, 0.367752, 0.552675},
	{0.206756, 0.371758, 0.553117}, {0.204903, 0.375746, 0.553533},
	{0.203063, 0.379716, 0.553925}, {0.201239, 0.383670, 0.554294},
	{0.199430, 0.387607, 0.554642}, {0.197636, 0.391528, 0.554969},
	{0.195860, 0.395433, 0.555276}, {0.194100, 0.399323, 0.555565},
	{0.192357, 0.403199, 0.555836}, {0.190631, 0.407061, 0.556089},
	{0.188923, 0.410910, 0.556326}, {0.187231, 0.414746, 0.556547},
	{0.185556, 0.418570, 0.556753}, {0.183898, 0.422383, 0.556944},
	{0.182256, 0.426184, 0.557120}, {0.180629, 0.429975, 0.557282},
	{0.179019, 0.433756, 0.557430}, {0.177423, 0.437527, 0.557565},
	{0.175841, 0.441290, 0.557685}, {0.174274, 0.445044, 0.557792},
	{0.172719, 0.448791, 0.557885}, {0.171176, 0.452530, 0.557965},
	{0.169646, 0.456262, 0.558030}, {0.168126, 0.459988, 0.558082},
	{0.166617, 0.463708, 0.558119}, {0.165117, 0.467423, 0.558141},
	{0.163625, 0.471133, 0.558148}, {0.162142, 0.474838, 0.558140},
	{0.160665, 0.478540, 0.558115}, {0.159194, 0.482237, 0.558073},
	{0.157729, 0.485932, 0.558013}, {0.156270, 0.489624, 0.557936},
	{0.154815, 0.493313, 0.557840}, {0.153364, 0.497000, 0.557724},
	{0.151918, 0.500685, 0.557587}, {0.150476, 0.504369, 0.557430},
	{0.149039, 0.508051, 0.557250}, {0.147607, 0.511733, 0.557049},
	{0.146180, 0.515413, 0.556823}, {0.144759, 0.519093, 0.556572},
	{0.143343, 0.522773, 0.556295}, {0.141935, 0.526453, 0.555991},
	{0.140536, 0.530132, 0.555659}, {0.139147, 0.533812, 0.555298},
	{0.137770, 0.537492, 0.554906}, {0.136408, 0.541173, 0.554483},
	{0.135066, 0.544853, 0.554029}, {0.133743, 0.548535, 0.553541},
	{0.132444, 0.552216, 0.553018}, {0.131172, 0.555899, 0.552459},
	{0.129933, 0.559582, 0.551864}, {0.128729, 0.563265, 0.551229},
	{0.127568, 0.566949, 0.550556}, {0.126453, 0.570633, 0.549841},
	{0.125394, 0.574318, 0.549086}, {0.124395, 0.578002, 0.548287},
	{0.123463, 0.581687, 0.547445}, {0.122606, 0.585371, 0.546557},
	{0.121831, 0.589055, 0.545623}, {0.121148, 0.592739, 0.544641},
	{0.120565, 0.596422, 0.543611}, {0.120092, 0.600104, 0.542530},
	{0.119738, 0.603785, 0.541400}, {0.119512, 0.607464, 0.540218},
	{0.119423, 0.611141, 0.538982}, {0.119483, 0.614817, 0.537692},
	{0.119699, 0.618490, 0.536347}, {0.120081, 0.622161, 0.534946},
	{0.120638, 0.625828, 0.533488}, {0.121380, 0.629492, 0.531973},
	{0.122312, 0.633153, 0.530398}, {0.123444, 0.636809, 0.528763},
	{0.124780, 0.640461, 0.527068}, {0.126326, 0.644107, 0.525311},
	{0.128087, 0.647749, 0.523491}, {0.130067, 0.651384, 0.521608},
	{0.132268, 0.655014, 0.519661}, {0.134692, 0.658636, 0.517649},
	{0.137339, 0.662252, 0.515571}, {0.140210, 0.665859, 0.513427},
	{0.143303, 0.669459, 0.511215}, {0.146616, 0.673050, 0.508936},
	{0.150148, 0.676631, 0.506589}, {0.153894, 0.680203, 0.504172},
	{0.157851, 0.683765, 0.501686}, {0.162016, 0.687316, 0.499129},
	{0.166383, 0.690856, 0.496502}, {0.170948, 0.694384, 0.493803},
	{0.175707, 0.697900, 0.491033}, {0.180653, 0.701402, 0.488189},
	{0.185783, 0.704891, 0.485273}, {0.191090, 0.708366, 0.482284},
	{0.196571, 0.711827, 0.479221}, {0.202219, 0.715272, 0.476084},
	{0.208030, 0.718701, 0.472873}, {0.214000, 0.722114, 0.469588},
	{0.220124, 0.725509, 0.466226}, {0.226397, 0.728888, 0.462789},
	{0.232815, 0.732247, 0.459277}, {0.239374, 0.735588, 0.455688},
	{0.246070, 0.738910, 0.452024}, {0.252899, 0.742211, 0.448284},
	{0.259857, 0.745492, 0.444467}, {0.266941, 0.748751, 0.440573},
	{0.274149, 0.751988, 0.436601}, {0.281477, 0.755203, 0.432552},
	{0.288921, 0.758394, 0.428426}, {0.296479, 0.761561, 0.424223},
	{0.304148, 0.764704, 0.419943}, {0.311925, 0.767822, 0.415586},
	{0.319809, 0.770914, 0.411152}, {0.327796, 0.773980, 0.406640},
	{0.335885, 0.777018, 0.402049}, {0.344074, 0.780029, 0.397381},
	{0.352360, 0.783011, 0.392636}, {0.360741, 0.785964, 0.387814},
	{0.369214, 0.788888, 0.382914}, {0.377779, 0.791781, 0.377939},
	{0.386433, 0.794644, 0.372886}, {0.395174, 0.797475, 0.367757},
	{0.404001, 0.800275, 0.362552}, {0.412913, 0.803041, 0.357269},
	{0.421908, 0.805774, 0.351910}, {0.430983, 0.808473, 0.346476},
	{0.440137, 0.811138, 0.340967}, {0.449368, 0.813768, 0.335384},
	{0.458674, 0.816363, 0.329727}, {0.468053, 0.818921, 0.323998},
	{0.477504, 0.821444, 0.318195}, {0.487026, 0.823929, 0.312321},
	{0.496615, 0.826376, 0.306377}, {0.506271, 0.828786, 0.300362},
	{0.515992, 0.831158, 0.294279}, {0.525776, 0.833491, 0.288127},
	{0.535621, 0.835785, 0.281908}, {0.545524, 0.838039, 0.275626},
	{0.555484, 0.840254, 0.269281}, {0.565498, 0.842430, 0.262877},
	{0.575563, 0.844566, 0.256415}, {0.585678, 0.846661, 0.249897},
	{0.595839, 0.848717, 0.243329}, {0.606045, 0.850733, 0.236712},
	{0.616293, 0.852709, 0.230052}, {0.626579, 0.854645, 0.223353},
	{0.636902, 0.856542, 0.216620}, {0.647257, 0.858400, 0.209861},
	{0.657642, 0.860219, 0.203082}, {0.668054, 0.861999, 0.196293},
	{0.678489, 0.863742, 0.189503}, {0.688944, 0.865448, 0.182725},
	{0.699415, 0.867117, 0.175971}, {0.709898, 0.868751, 0.169257},
	{0.720391, 0.870350, 0.162603}, {0.730889, 0.871916, 0.156029},
	{0.741388, 0.873449, 0.149561}, {0.751884, 0.874951, 0.143228},
	{0.762373, 0.876424, 0.137064}, {0.772852, 0.877868, 0.131109},
	{0.783315, 0.879285, 0.125405}, {0.793760, 0.880678, 0.120005},
	{0.804182, 0.882046, 0.114965}, {0.814576, 0.883393, 0.110347},
	{0.824940, 0.884720, 0.106217}, {0.835270, 0.886029, 0.102646},
	{0.845561, 0.887322, 0.099702}, {0.855810, 0.888601, 0.097452},
	{0.866013, 0.889868, 0.095953}, {0.876168, 0.891125, 0.095250},
	{0.886271, 0.892374, 0.095374}, {0.896320, 0.893616, 0.096335},
	{0.906311, 0.894855, 0.098125}, {0.916242, 0.896091, 0.100717},
	{0.926106, 0.897330, 0.104071}, {0.935904, 0.898570, 0.108131},
	{0.945636, 0.899815, 0.112838}, {0.955300, 0.901065, 0.118128},
	{0.964894, 0.902323, 0.123941}, {0.974417, 0.903590, 0.130215},
	{0.983868, 0.904867, 0.136897}, {0.993248, 0.906157, 0.143936},
};

/* sRGB <-> CIELAB (D65), IEC 61966-2-1 and CIE 15:2004. */
static const double white_d65[3] = {0.95047, 1.0, 1.08883};

static double srgb_to_linear(double c)
{
	return c <= 0.04045 ? c / 12.92 : pow((c + 0.055) / 1.055, 2.4);
}

static double linear_to_srgb(double c)
{
	return c <= 0.0031308 ? 12.92 * c : 1.055 * pow(c, 1 / 2.4) - 0.055;
}

static double lab_f(double t)
{
	const double d = 6.0 / 29.0;

	return t > d * d * d ? cbrt(t) : t / (3 * d * d) + 4.0 / 29.0;
}

static double lab_finv(double t)
{
	const double d = 6.0 / 29.0;

	return t > d ? t * t * t : 3 * d * d * (t - 4.0 / 29.0);
}

static void rgb_to_msh(const double rgb[3], double msh[3])
{
	double l[3], xyz[3], lab[3];

	for (int k = 0; k < 3; k++) {
		l[k] = srgb_to_linear(rgb[k]);
	}
	xyz[0] = 0.4124564 * l[0] + 0.3575761 * l[1] + 0.1804375 * l[2];
	xyz[1] = 0.2126729 * l[0] + 0.7151522 * l[1] + 0.0721750 * l[2];
	xyz[2] = 0.0193339 * l[0] + 0.1191920 * l[1] + 0.9503041 * l[2];
	lab[0] = 116 * lab_f(xyz[1] / white_d65[1]) - 16;
	lab[1] = 500 *
		 (lab_f(xyz[0] / white_d65[0]) - lab_f(xyz[1] / white_d65[1]));
	lab[2] = 200 *
		 (lab_f(xyz[1] / white_d65[1]) - lab_f(xyz[2] / white_d65[2]));
	msh[0] = sqrt(lab[0] * lab[0] + lab[1] * lab[1] + lab[2] * lab[2]);
	msh[1] = msh[0] > 0 ? acos(lab[0] / msh[0]) : 0;
	msh[2] = atan2(lab[2], lab[1]);
}

static void msh_to_rgb(const double msh[3], double rgb[3])
{
	double lab[3], xyz[3], l[3], fy;

	lab[0] = msh[0] * cos(msh[1]);
	lab[1] = msh[0] * sin(msh[1]) * cos(msh[2]);
	lab[2] = msh[0] * sin(msh[1]) * sin(msh[2]);
	fy = (lab[0] + 16) / 116;
	xyz[0] = white_d65[0] * lab_finv(fy + lab[1] / 500);
	xyz[1] = white_d65[1] * lab_finv(fy);
	xyz[2] = white_d65[2] * lab_finv(fy - lab[2] / 200);
	l[0] = 3.2404542 * xyz[0] - 1.5371385 * xyz[1] - 0.4985314 * xyz[2];
	l[1] = -0.9692660 * xyz[0] + 1.8760108 * xyz[1] + 0.0415560 * xyz[2];
	l[2] = 0.0556434 * xyz[0] - 0.2040259 * xyz[1] + 1.0572252 * xyz[2];
	for (int k = 0; k < 3; k++) {
		double c = linear_to_srgb(l[k] < 0 ? 0 : l[k]);

		rgb[k] = c < 0 ? 0 : (c > 1 ? 1 : c);
	}
}

/* Moreland 2009, section 5: the hue of an unsaturated end point. */
static double adjust_hue(const double msh[3], double m_unsat)
{
	double spin;

	if (msh[0] >= m_unsat) {
		return msh[2];
	}
	spin = msh[1] * sqrt(m_unsat * m_unsat - msh[0] * msh[0]) /
	       (msh[0] * sin(msh[1]));
	return msh[2] > -M_PI / 3 ? msh[2] + spin : msh[2] - spin;
}

/* Moreland 2009, the diverging interpolation from (59, 76, 192) to (180, 4,
 * 38) through a white of M = 88 (max of both end points' M and 88). */
static void coolwarm(double t, double rgb[3])
{
	const double c1[3] = {59 / 255.0, 76 / 255.0, 192 / 255.0};
	const double c2[3] = {180 / 255.0, 4 / 255.0, 38 / 255.0};
	double a[3], b[3], m[3], mid;

	rgb_to_msh(c1, a);
	rgb_to_msh(c2, b);
	mid = fmax(fmax(a[0], b[0]), 88);
	if (t < 0.5) {
		b[0] = mid;
		b[1] = 0;
		b[2] = 0;
		t = 2 * t;
	} else {
		a[0] = mid;
		a[1] = 0;
		a[2] = 0;
		t = 2 * t - 1;
	}
	/* The unsaturated end takes its hue from the saturated one. */
	if (a[1] < 0.05 && b[1] > 0.05) {
		a[2] = adjust_hue(b, a[0]);
	} else if (b[1] < 0.05 && a[1] > 0.05) {
		b[2] = adjust_hue(a, b[0]);
	}
	for (int k = 0; k < 3; k++) {
		m[k] = (1 - t) * a[k] + t * b[k];
	}
	msh_to_rgb(m, rgb);
}

void wt_draw_cmap(enum wt_cmap map, double t, double rgb[3])
{
	if (isnan(t)) {
		rgb[0] = rgb[1] = rgb[2] = 0.5;
		return;
	}
	t = t < 0 ? 0 : (t > 1 ? 1 : t);
	if (map == WT_CMAP_COOLWARM) {
		coolwarm(t, rgb);
		return;
	}
	memcpy(rgb, viridis[(int)lround(t * (WT_CMAP_SIZE - 1))],
	       3 * sizeof(double));
}

void wt_draw_cmap_table(enum wt_cmap map, uint8_t table[WT_CMAP_SIZE][3])
{
	for (int k = 0; k < WT_CMAP_SIZE; k++) {
		double rgb[3];

		wt_draw_cmap(map, k / (double)(WT_CMAP_SIZE - 1), rgb);
		for (int c = 0; c < 3; c++) {
			table[k][c] = (uint8_t)lround(rgb[c] * 255);
		}
	}
}

/* --- checksums, PNG, base64 ----------------------------------------------- */

uint32_t wt_draw_crc32(uint32_t crc, const void *buf, size_t len)
{
	const uint8_t *p = buf;

	crc = ~crc;
	while (len--) {
		crc ^= *p++;
		for (int k = 0; k < 8; k++) {
			crc = (crc >> 1) ^ (0xEDB88320u & (0u - (crc & 1u)));
		}
	}
	return ~crc;
}

uint32_t wt_draw_adler32(uint32_t adler, const void *buf, size_t len)
{
	const uint8_t *p = buf;
	uint32_t a = adler & 0xffff, b = adler >> 16;

	while (len > 0) {
		/* 5552 bytes keep b below 2^32 before the modulo (RFC 1950). */
		size_t n = len < 5552 ? len : 5552;

		len -= n;
		while (n--) {
			a += *p++;
			b += a;
		}
		a %= 65521;
		b %= 65521;
	}
	return (b << 16) | a;
}

static void put32(uint8_t *p, uint32_t v)
{
	p[0] = (uint8_t)(v >> 24);
	p[1] = (uint8_t)(v >> 16);
	p[2] = (uint8_t)(v >> 8);
	p[3] = (uint8_t)v;
}

/* Write a chunk's length, type, data and CRC at p; returns the bytes. */
static size_t png_chunk(uint8_t *p, const char type[4], const uint8_t *data,
			size_t n)
{
	put32(p, (uint32_t)n);
	memcpy(p + 4, type, 4);
	if (n > 0 && data != p + 8) {
		memcpy(p + 8, data, n);
	}
	put32(p + 8 + n, wt_draw_crc32(0, p + 4, n + 4));
	return n + 12;
}

int wt_draw_png_encode(const uint8_t *pixels, int width, int height,
		       int channels, uint8_t **out, size_t *out_len,
		       wt_error *err)
{
	static const uint8_t signature[8] = {0x89, 'P',	 'N',  'G',
					     '\r', '\n', 0x1a, '\n'};
	size_t row, raw, blocks, zlen, total, pos, left;
	uint8_t ihdr[13], *buf, *z;
	const uint8_t *src;
	uint32_t adler = 1;

	if (!pixels || !out || !out_len || width < 1 || height < 1 ||
	    width > 65535 || height > 65535 ||
	    (channels != 3 && channels != 4)) {
		return wt_error_set(err, -EINVAL, "png: bad image size");
	}
	row = (size_t)width * (size_t)channels + 1;
	raw = row * (size_t)height;
	if (raw > (size_t)1 << 30) {
		return wt_error_set(err, -EINVAL, "png: image too large");
	}
	blocks = raw / 65535 + 1;
	zlen = 2 + raw + 5 * blocks + 4;
	total = sizeof(signature) + 25 + 12 + zlen + 12;
	buf = malloc(total);
	if (!buf) {
		return wt_error_set(err, -ENOMEM, "png: out of memory");
	}
	memcpy(buf, signature, sizeof(signature));
	pos = sizeof(signature);
	put32(ihdr, (uint32_t)width);
	put32(ihdr + 4, (uint32_t)height);
	ihdr[8] = 8;			 /* bit depth */
	ihdr[9] = channels == 4 ? 6 : 2; /* RGBA or RGB */
	/* deflate, filter 0, no interlace */
	ihdr[10] = ihdr[11] = ihdr[12] = 0;
	pos += png_chunk(buf + pos, "IHDR", ihdr, sizeof(ihdr));

	/* The IDAT data: a zlib stream (RFC 1950) of stored blocks. */
	z = buf + pos + 8;
	z[0] = 0x78; /* deflate, 32 KiB window */
	/* No dictionary, lowest level: (0x78 << 8 | 0x01) % 31 == 0. */
	z[1] = 0x01;
	zlen = 2;
	left = raw;
	src = pixels;
	for (size_t in_row = 0; left > 0;) {
		size_t n = left < 65535 ? left : 65535;
		uint8_t *h = z + zlen;
		uint8_t *d = h + 5;

		h[0] = n == left ? 1 : 0; /* BFINAL, BTYPE 00 */
		h[1] = (uint8_t)n;
		h[2] = (uint8_t)(n >> 8);
		h[3] = (uint8_t)~n;
		h[4] = (uint8_t)(~n >> 8);
		for (size_t k = 0; k < n; k++) {
			if (in_row == 0) {
				d[k] = 0; /* filter type None */
			} else {
				d[k] = *src++;
			}
			if (++in_row == row) {
				in_row = 0;
			}
		}
		adler = wt_draw_adler32(adler, d, n);
		zlen += 5 + n;
		left -= n;
	}
	put32(z + zlen, adler);
	zlen += 4;
	pos += png_chunk(buf + pos, "IDAT", z, zlen);
	pos += png_chunk(buf + pos, "IEND", NULL, 0);
	*out = buf;
	*out_len = pos;
	return 0;
}

static int write_file(const char *path, const void *data, size_t len,
		      wt_error *err)
{
	FILE *f = fopen(path, "wb");
	int bad;

	if (!f) {
		return wt_error_set(err, -errno, "%s: %s", path,
				    strerror(errno));
	}
	bad = fwrite(data, 1, len, f) != len;
	if (fclose(f) != 0 || bad) {
		return wt_error_set(err, -EIO, "%s: write failed", path);
	}
	return 0;
}

int wt_draw_png_write(const uint8_t *pixels, int width, int height,
		      int channels, const char *path, wt_error *err)
{
	uint8_t *png;
	size_t len;
	int rc;

	rc = wt_draw_png_encode(pixels, width, height, channels, &png, &len,
				err);
	if (rc < 0) {
		return rc;
	}
	rc = write_file(path, png, len, err);
	free(png);
	return rc;
}

/* --- text buffer ---------------------------------------------------------- */

struct sbuf {
	char *buf;
	size_t len, cap;
	bool failed;
};

static bool sb_reserve(struct sbuf *b, size_t more)
{
	size_t cap = b->cap ? b->cap : 4096;
	char *p;

	if (b->failed) {
		return false;
	}
	while (cap < b->len + more + 1) {
		cap *= 2;
	}
	if (cap != b->cap) {
		p = realloc(b->buf, cap);
		if (!p) {
			b->failed = true;
			return false;
		}
		b->buf = p;
		b->cap = cap;
	}
	return true;
}

static void sb_printf(struct sbuf *b, const char *fmt, ...)
	__attribute__((format(printf, 2, 3)));

static void sb_printf(struct sbuf *b, const char *fmt, ...)
{
	va_list ap;
	int n;

	if (!sb_reserve(b, 256)) {
		return;
	}
	va_start(ap, fmt);
	n = vsnprintf(b->buf + b->len, b->cap - b->len, fmt, ap);
	va_end(ap);
	if (n < 0) {
		b->failed = true;
		return;
	}
	if ((size_t)n >= b->cap - b->len) {
		if (!sb_reserve(b, (size_t)n)) {
			return;
		}
		va_start(ap, fmt);
		vsnprintf(b->buf + b->len, b->cap - b->len, fmt, ap);
		va_end(ap);
	}
	b->len += (size_t)n;
}

/* Text as XML character data (the font covers printable ASCII only). */
static void sb_xml(struct sbuf *b, const char *s)
{
	for (; *s; s++) {
		unsigned char c = (unsigned char)*s;

		if (c == '<') {
			sb_printf(b, "&lt;");
		} else if (c == '>') {
			sb_printf(b, "&gt;");
		} else if (c == '&') {
			sb_printf(b, "&amp;");
		} else if (c == '"') {
			sb_printf(b, "&quot;");
		} else if (c >= 0x20 && c < 0x7f) {
			sb_printf(b, "%c", c);
		} else {
			sb_printf(b, "?");
		}
	}
}

size_t wt_draw_base64(const uint8_t *p, size_t n, char *out)
{
	static const char abc[] = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
				  "abcdefghijklmnopqrstuvwxyz0123456789+/";
	char *o = out;

	for (size_t i = 0; i < n; i += 3, o += 4) {
		uint32_t v = (uint32_t)p[i] << 16;

		if (i + 1 < n) {
			v |= (uint32_t)p[i + 1] << 8;
		}
		if (i + 2 < n) {
			v |= p[i + 2];
		}
		o[0] = abc[(v >> 18) & 63];
		o[1] = abc[(v >> 12) & 63];
		o[2] = i + 1 < n ? abc[(v >> 6) & 63] : '=';
		o[3] = i + 2 < n ? abc[v & 63] : '=';
	}
	*o = '\0';
	return (size_t)(o - out);
}

static void sb_base64(struct sbuf *b, const uint8_t *p, size_t n)
{
	if (!sb_reserve(b, (n + 2) / 3 * 4)) {
		return;
	}
	b->len += wt_draw_base64(p, n, b->buf + b->len);
}

/* --- the canvas ----------------------------------------------------------- */

/* Text anchors. */
enum { LEFT = 0, MIDDLE = 1, RIGHT = 2 };

/* Colours as 0xRRGGBB. */
#define INK    0x222222u
#define GREY   0x888888u
#define PALE   0xddddddu
#define PAPER  0xffffffu
#define ACCENT 0x1f77b4u
#define ALERT  0xc0392bu
#define TRUTH  0xe08a00u

struct cv;

/* Drawing primitives; coordinates in pixels, y downwards. */
struct cv_ops {
	void (*rect)(struct cv *c, double x, double y, double w, double h,
		     uint32_t fill);
	void (*line)(struct cv *c, double x0, double y0, double x1, double y1,
		     uint32_t col, double width);
	void (*disc)(struct cv *c, double x, double y, double r, uint32_t fill);
	void (*ring)(struct cv *c, double x, double y, double r, uint32_t col,
		     double width);
	/* size 1 or 2: a 6 x 9 or 12 x 18 pixel cell per character; y is the
	 * baseline. */
	void (*text)(struct cv *c, double x, double y, int anchor, int size,
		     uint32_t col, const char *s);
	/* An iw x ih RGBA image stretched over the rectangle, alpha 0 left
	 * out. */
	void (*image)(struct cv *c, double x, double y, double w, double h,
		      const uint8_t *rgba, int iw, int ih);
	/* A named group (SVG <g id="panel-NAME">) around what follows until
	 * group_end; nothing in a raster. */
	void (*group)(struct cv *c, const char *name);
	void (*group_end)(struct cv *c);
};

struct cv {
	const struct cv_ops *ops;
	int width, height;
	wt_error *err;
};

/* The 5 x 7 font for printable ASCII, one byte a row, bit 4 leftmost. */
static const uint8_t font5x7[95][7] = {
	{0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x00}, /*   */
	{0x04, 0x04, 0x04, 0x04, 0x04, 0x00, 0x04}, /* ! */
	{0x0a, 0x0a, 0x0a, 0x00, 0x00, 0x00, 0x00}, /* " */
	{0x0a, 0x0a, 0x1f, 0x0a, 0x1f, 0x0a, 0x0a}, /* # */
	{0x04, 0x0f, 0x14, 0x0e, 0x05, 0x1e, 0x04}, /* $ */
	{0x18, 0x19, 0x02, 0x04, 0x08, 0x13, 0x03}, /* % */
	{0x0c, 0x12, 0x14, 0x08, 0x15, 0x12, 0x0d}, /* & */
	{0x04, 0x04, 0x04, 0x00, 0x00, 0x00, 0x00}, /* ' */
	{0x02, 0x04, 0x08, 0x08, 0x08, 0x04, 0x02}, /* ( */
	{0x08, 0x04, 0x02, 0x02, 0x02, 0x04, 0x08}, /* ) */
	{0x00, 0x04, 0x15, 0x0e, 0x15, 0x04, 0x00}, /* star */
	{0x00, 0x04, 0x04, 0x1f, 0x04, 0x04, 0x00}, /* + */
	{0x00, 0x00, 0x00, 0x00, 0x0c, 0x04, 0x08}, /* , */
	{0x00, 0x00, 0x00, 0x1f, 0x00, 0x00, 0x00}, /* - */
	{0x00, 0x00, 0x00, 0x00, 0x00, 0x0c, 0x0c}, /* . */
	{0x00, 0x01, 0x02, 0x04, 0x08, 0x10, 0x00}, /* slash */
	{0x0e, 0x11, 0x13, 0x15, 0x19, 0x11, 0x0e}, /* 0 */
	{0x04, 0x0c, 0x04, 0x04, 0x04, 0x04, 0x0e}, /* 1 */
	{0x0e, 0x11, 0x01, 0x02, 0x04, 0x08, 0x1f}, /* 2 */
	{0x1f, 0x02, 0x04, 0x02, 0x01, 0x11, 0x0e}, /* 3 */
	{0x02, 0x06, 0x0a, 0x12, 0x1f, 0x02, 0x02}, /* 4 */
	{0x1f, 0x10, 0x1e, 0x01, 0x01, 0x11, 0x0e}, /* 5 */
	{0x06, 0x08, 0x10, 0x1e, 0x11, 0x11, 0x0e}, /* 6 */
	{0x1f, 0x01, 0x02, 0x04, 0x08, 0x08, 0x08}, /* 7 */
	{0x0e, 0x11, 0x11, 0x0e, 0x11, 0x11, 0x0e}, /* 8 */
	{0x0e, 0x11, 0x11, 0x0f, 0x01, 0x02, 0x0c}, /* 9 */
	{0x00, 0x0c, 0x0c, 0x00, 0x0c, 0x0c, 0x00}, /* : */
	{0x00, 0x0c, 0x0c, 0x00, 0x0c, 0x04, 0x08}, /* ; */
	{0x02, 0x04, 0x08, 0x10, 0x08, 0x04, 0x02}, /* < */
	{0x00, 0x00, 0x1f, 0x00, 0x1f, 0x00, 0x00}, /* = */
	{0x08, 0x04, 0x02, 0x01, 0x02, 0x04, 0x08}, /* > */
	{0x0e, 0x11, 0x01, 0x02, 0x04, 0x00, 0x04}, /* ? */
	{0x0e, 0x11, 0x01, 0x0d, 0x15, 0x15, 0x0e}, /* @ */
	{0x0e, 0x11, 0x11, 0x1f, 0x11, 0x11, 0x11}, /* A */
	{0x1e, 0x11, 0x11, 0x1e, 0x11, 0x11, 0x1e}, /* B */
	{0x0e, 0x11, 0x10, 0x10, 0x10, 0x11, 0x0e}, /* C */
	{0x1c, 0x12, 0x11, 0x11, 0x11, 0x12, 0x1c}, /* D */
	{0x1f, 0x10, 0x10, 0x1e, 0x10, 0x10, 0x1f}, /* E */
	{0x1f, 0x10, 0x10, 0x1e, 0x10, 0x10, 0x10}, /* F */
	{0x0e, 0x11, 0x10, 0x17, 0x11, 0x11, 0x0f}, /* G */
	{0x11, 0x11, 0x11, 0x1f, 0x11, 0x11, 0x11}, /* H */
	{0x0e, 0x04, 0x04, 0x04, 0x04, 0x04, 0x0e}, /* I */
	{0x07, 0x02, 0x02, 0x02, 0x02, 0x12, 0x0c}, /* J */
	{0x11, 0x12, 0x14, 0x18, 0x14, 0x12, 0x11}, /* K */
	{0x10, 0x10, 0x10, 0x10, 0x10, 0x10, 0x1f}, /* L */
	{0x11, 0x1b, 0x15, 0x15, 0x11, 0x11, 0x11}, /* M */
	{0x11, 0x11, 0x19, 0x15, 0x13, 0x11, 0x11}, /* N */
	{0x0e, 0x11, 0x11, 0x11, 0x11, 0x11, 0x0e}, /* O */
	{0x1e, 0x11, 0x11, 0x1e, 0x10, 0x10, 0x10}, /* P */
	{0x0e, 0x11, 0x11, 0x11, 0x15, 0x12, 0x0d}, /* Q */
	{0x1e, 0x11, 0x11, 0x1e, 0x14, 0x12, 0x11}, /* R */
	{0x0f, 0x10, 0x10, 0x0e, 0x01, 0x01, 0x1e}, /* S */
	{0x1f, 0x04, 0x04, 0x04, 0x04, 0x04, 0x04}, /* T */
	{0x11, 0x11, 0x11, 0x11, 0x11, 0x11, 0x0e}, /* U */
	{0x11, 0x11, 0x11, 0x11, 0x11, 0x0a, 0x04}, /* V */
	{0x11, 0x11, 0x11, 0x15, 0x15, 0x15, 0x0a}, /* W */
	{0x11, 0x11, 0x0a, 0x04, 0x0a, 0x11, 0x11}, /* X */
	{0x11, 0x11, 0x0a, 0x04, 0x04, 0x04, 0x04}, /* Y */
	{0x1f, 0x01, 0x02, 0x04, 0x08, 0x10, 0x1f}, /* Z */
	{0x0e, 0x08, 0x08, 0x08, 0x08, 0x08, 0x0e}, /* [ */
	{0x00, 0x10, 0x08, 0x04, 0x02, 0x01, 0x00}, /* backslash */
	{0x0e, 0x02, 0x02, 0x02, 0x02, 0x02, 0x0e}, /* ] */
	{0x04, 0x0a, 0x11, 0x00, 0x00, 0x00, 0x00}, /* ^ */
	{0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0x1f}, /* _ */
	{0x08, 0x04, 0x02, 0x00, 0x00, 0x00, 0x00}, /* ` */
	{0x00, 0x00, 0x0e, 0x01, 0x0f, 0x11, 0x0f}, /* a */
	{0x10, 0x10, 0x16, 0x19, 0x11, 0x11, 0x1e}, /* b */
	{0x00, 0x00, 0x0e, 0x10, 0x10, 0x11, 0x0e}, /* c */
	{0x01, 0x01, 0x0d, 0x13, 0x11, 0x11, 0x0f}, /* d */
	{0x00, 0x00, 0x0e, 0x11, 0x1f, 0x10, 0x0e}, /* e */
	{0x06, 0x09, 0x08, 0x1c, 0x08, 0x08, 0x08}, /* f */
	{0x00, 0x0f, 0x11, 0x11, 0x0f, 0x01, 0x0e}, /* g */
	{0x10, 0x10, 0x16, 0x19, 0x11, 0x11, 0x11}, /* h */
	{0x04, 0x00, 0x0c, 0x04, 0x04, 0x04, 0x0e}, /* i */
	{0x02, 0x00, 0x06, 0x02, 0x02, 0x12, 0x0c}, /* j */
	{0x10, 0x10, 0x12, 0x14, 0x18, 0x14, 0x12}, /* k */
	{0x0c, 0x04, 0x04, 0x04, 0x04, 0x04, 0x0e}, /* l */
	{0x00, 0x00, 0x1a, 0x15, 0x15, 0x11, 0x11}, /* m */
	{0x00, 0x00, 0x16, 0x19, 0x11, 0x11, 0x11}, /* n */
	{0x00, 0x00, 0x0e, 0x11, 0x11, 0x11, 0x0e}, /* o */
	{0x00, 0x00, 0x1e, 0x11, 0x1e, 0x10, 0x10}, /* p */
	{0x00, 0x00, 0x0d, 0x13, 0x0f, 0x01, 0x01}, /* q */
	{0x00, 0x00, 0x16, 0x19, 0x10, 0x10, 0x10}, /* r */
	{0x00, 0x00, 0x0e, 0x10, 0x0e, 0x01, 0x1e}, /* s */
	{0x08, 0x08, 0x1c, 0x08, 0x08, 0x09, 0x06}, /* t */
	{0x00, 0x00, 0x11, 0x11, 0x11, 0x13, 0x0d}, /* u */
	{0x00, 0x00, 0x11, 0x11, 0x11, 0x0a, 0x04}, /* v */
	{0x00, 0x00, 0x11, 0x11, 0x15, 0x15, 0x0a}, /* w */
	{0x00, 0x00, 0x11, 0x0a, 0x04, 0x0a, 0x11}, /* x */
	{0x00, 0x00, 0x11, 0x11, 0x0f, 0x01, 0x0e}, /* y */
	{0x00, 0x00, 0x1f, 0x02, 0x04, 0x08, 0x1f}, /* z */
	{0x02, 0x04, 0x04, 0x08, 0x04, 0x04, 0x02}, /* { */
	{0x04, 0x04, 0x04, 0x04, 0x04, 0x04, 0x04}, /* | */
	{0x08, 0x04, 0x04, 0x02, 0x04, 0x04, 0x08}, /* } */
	{0x00, 0x00, 0x08, 0x15, 0x02, 0x00, 0x00}, /* ~ */
};

/* Raster backend. */
struct raster {
	struct cv base;
	uint8_t *rgb;
};

static void blend(struct raster *r, int x, int y, uint32_t col, double a)
{
	uint8_t *p;

	if (x < 0 || y < 0 || x >= r->base.width || y >= r->base.height ||
	    a <= 0) {
		return;
	}
	if (a > 1) {
		a = 1;
	}
	p = r->rgb + 3 * ((size_t)y * (size_t)r->base.width + (size_t)x);
	for (int k = 0; k < 3; k++) {
		double c = (double)((col >> (16 - 8 * k)) & 0xff);

		p[k] = (uint8_t)lround(p[k] + (c - p[k]) * a);
	}
}

/* Integer pixel range [*a, *b) covering [lo, hi], clipped to [0, n). */
static void span(double lo, double hi, int n, int *a, int *b)
{
	*a = (int)floor(lo);
	*b = (int)ceil(hi);
	if (*a < 0) {
		*a = 0;
	}
	if (*b > n) {
		*b = n;
	}
}

static void r_rect(struct cv *c, double x, double y, double w, double h,
		   uint32_t fill)
{
	struct raster *r = container_of(c, struct raster, base);
	int x0 = (int)lround(x), x1 = (int)lround(x + w);
	int y0 = (int)lround(y), y1 = (int)lround(y + h);

	for (int j = y0 < 0 ? 0 : y0; j < y1 && j < c->height; j++) {
		for (int i = x0 < 0 ? 0 : x0; i < x1 && i < c->width; i++) {
			blend(r, i, j, fill, 1);
		}
	}
}

/* Anti-aliased: coverage from the distance of each pixel centre. */
static void r_line(struct cv *c, double x0, double y0, double x1, double y1,
		   uint32_t col, double width)
{
	struct raster *r = container_of(c, struct raster, base);
	double hw = width / 2, dx = x1 - x0, dy = y1 - y0;
	double l2 = dx * dx + dy * dy;
	int ia, ib, ja, jb;

	span(fmin(x0, x1) - hw - 1, fmax(x0, x1) + hw + 1, c->width, &ia, &ib);
	span(fmin(y0, y1) - hw - 1, fmax(y0, y1) + hw + 1, c->height, &ja, &jb);
	for (int j = ja; j < jb; j++) {
		for (int i = ia; i < ib; i++) {
			double px = i + 0.5 - x0, py = j + 0.5 - y0, t, ex, ey;

			t = l2 > 0 ? (px * dx + py * dy) / l2 : 0;
			t = t < 0 ? 0 : (t > 1 ? 1 : t);
			ex = px - t * dx;
			ey = py - t * dy;
			blend(r, i, j, col, hw + 0.5 - sqrt(ex * ex + ey * ey));
		}
	}
}

static void r_disc(struct cv *c, double x, double y, double rad, uint32_t fill)
{
	struct raster *r = container_of(c, struct raster, base);
	int ia, ib, ja, jb;

	span(x - rad - 1, x + rad + 1, c->width, &ia, &ib);
	span(y - rad - 1, y + rad + 1, c->height, &ja, &jb);
	for (int j = ja; j < jb; j++) {
		for (int i = ia; i < ib; i++) {
			double d = hypot(i + 0.5 - x, j + 0.5 - y);

			blend(r, i, j, fill, rad + 0.5 - d);
		}
	}
}

static void r_ring(struct cv *c, double x, double y, double rad, uint32_t col,
		   double width)
{
	struct raster *r = container_of(c, struct raster, base);
	double hw = width / 2;
	int ia, ib, ja, jb;

	span(x - rad - hw - 1, x + rad + hw + 1, c->width, &ia, &ib);
	span(y - rad - hw - 1, y + rad + hw + 1, c->height, &ja, &jb);
	for (int j = ja; j < jb; j++) {
		for (int i = ia; i < ib; i++) {
			double d = hypot(i + 0.5 - x, j + 0.5 - y);

			blend(r, i, j, col, hw + 0.5 - fabs(d - rad));
		}
	}
}

static double text_width(const char *s, int size)
{
	size_t n = strlen(s);

	return n == 0 ? 0 : (double)(6 * n - 1) * size;
}

static void r_text(struct cv *c, double x, double y, int anchor, int size,
		   uint32_t col, const char *s)
{
	struct raster *r = container_of(c, struct raster, base);
	int x0 = (int)lround(x - text_width(s, size) * anchor / 2.0);
	int top = (int)lround(y) - 7 * size;

	for (; *s; s++, x0 += 6 * size) {
		unsigned char ch = (unsigned char)*s;
		const uint8_t *g;

		if (ch < 32 || ch > 126) {
			ch = '?';
		}
		g = font5x7[ch - 32];
		for (int row = 0; row < 7 * size; row++) {
			for (int bit = 0; bit < 5 * size; bit++) {
				if (g[row / size] & (0x10 >> (bit / size))) {
					blend(r, x0 + bit, top + row, col, 1);
				}
			}
		}
	}
}

static void r_image(struct cv *c, double x, double y, double w, double h,
		    const uint8_t *rgba, int iw, int ih)
{
	struct raster *r = container_of(c, struct raster, base);
	int ia, ib, ja, jb;

	span(x, x + w, c->width, &ia, &ib);
	span(y, y + h, c->height, &ja, &jb);
	for (int j = ja; j < jb; j++) {
		int sj = (int)floor((j + 0.5 - y) / h * ih);

		if (sj < 0 || sj >= ih) {
			continue;
		}
		for (int i = ia; i < ib; i++) {
			int si = (int)floor((i + 0.5 - x) / w * iw);
			const uint8_t *p;

			if (si < 0 || si >= iw) {
				continue;
			}
			p = rgba + 4 * ((size_t)sj * (size_t)iw + (size_t)si);
			blend(r, i, j,
			      (uint32_t)p[0] << 16 | (uint32_t)p[1] << 8 | p[2],
			      p[3] / 255.0);
		}
	}
}

static void r_group(struct cv *c, const char *name)
{
	(void)c;
	(void)name;
}

static void r_group_end(struct cv *c)
{
	(void)c;
}

static const struct cv_ops raster_ops = {
	.rect = r_rect,
	.line = r_line,
	.disc = r_disc,
	.ring = r_ring,
	.text = r_text,
	.image = r_image,
	.group = r_group,
	.group_end = r_group_end,
};

/* SVG backend. */
struct svg {
	struct cv base;
	struct sbuf sb;
};

static void s_rect(struct cv *c, double x, double y, double w, double h,
		   uint32_t fill)
{
	struct svg *s = container_of(c, struct svg, base);

	sb_printf(&s->sb,
		  "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" "
		  "fill=\"#%06x\"/>\n",
		  x, y, w, h, fill);
}

static void s_line(struct cv *c, double x0, double y0, double x1, double y1,
		   uint32_t col, double width)
{
	struct svg *s = container_of(c, struct svg, base);

	sb_printf(&s->sb,
		  "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" "
		  "stroke=\"#%06x\" stroke-width=\"%.1f\" "
		  "stroke-linecap=\"round\"/>\n",
		  x0, y0, x1, y1, col, width);
}

static void s_disc(struct cv *c, double x, double y, double r, uint32_t fill)
{
	struct svg *s = container_of(c, struct svg, base);

	sb_printf(&s->sb,
		  "<circle cx=\"%.1f\" cy=\"%.1f\" r=\"%.2f\" "
		  "fill=\"#%06x\"/>\n",
		  x, y, r, fill);
}

static void s_ring(struct cv *c, double x, double y, double r, uint32_t col,
		   double width)
{
	struct svg *s = container_of(c, struct svg, base);

	sb_printf(&s->sb,
		  "<circle cx=\"%.1f\" cy=\"%.1f\" r=\"%.2f\" fill=\"none\" "
		  "stroke=\"#%06x\" stroke-width=\"%.1f\"/>\n",
		  x, y, r, col, width);
}

static void s_text(struct cv *c, double x, double y, int anchor, int size,
		   uint32_t col, const char *str)
{
	static const char *const anchors[] = {"start", "middle", "end"};
	struct svg *s = container_of(c, struct svg, base);

	sb_printf(&s->sb,
		  "<text x=\"%.1f\" y=\"%.1f\" font-size=\"%d\" "
		  "text-anchor=\"%s\" fill=\"#%06x\">",
		  x, y, 10 * size, anchors[anchor], col);
	sb_xml(&s->sb, str);
	sb_printf(&s->sb, "</text>\n");
}

static void s_image(struct cv *c, double x, double y, double w, double h,
		    const uint8_t *rgba, int iw, int ih)
{
	struct svg *s = container_of(c, struct svg, base);
	uint8_t *png;
	size_t len;

	if (wt_draw_png_encode(rgba, iw, ih, 4, &png, &len, c->err) < 0) {
		s->sb.failed = true;
		return;
	}
	sb_printf(&s->sb,
		  "<image x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" "
		  "preserveAspectRatio=\"none\" "
		  "style=\"image-rendering:pixelated\" "
		  "href=\"data:image/png;base64,",
		  x, y, w, h);
	sb_base64(&s->sb, png, len);
	sb_printf(&s->sb, "\"/>\n");
	free(png);
}

static void s_group(struct cv *c, const char *name)
{
	struct svg *s = container_of(c, struct svg, base);

	sb_printf(&s->sb, "<g id=\"panel-");
	sb_xml(&s->sb, name);
	sb_printf(&s->sb, "\">\n");
}

static void s_group_end(struct cv *c)
{
	struct svg *s = container_of(c, struct svg, base);

	sb_printf(&s->sb, "</g>\n");
}

static const struct cv_ops svg_ops = {
	.rect = s_rect,
	.line = s_line,
	.disc = s_disc,
	.ring = s_ring,
	.text = s_text,
	.image = s_image,
	.group = s_group,
	.group_end = s_group_end,
};

/* --- the scene ------------------------------------------------------------ */

/* Highest radial order fitted. */
#define MAX_ORDER 8
/* A history value is used for this many samples after it arrived. */
#define FRESH_SAMPLES 10

struct wt_draw_scene {
	wt_grid *lens, *act;
	int n_sub, n_act;
	double min_flux, limit_low, limit_high;
	double *G;	 /* 2N x n_modes, all subapertures */
	double *g_valid; /* the rows of the valid ones */
	double *s_valid; /* their slopes, um per pupil radius */
	float *slopes, *flux, *command;
	uint8_t *valid, *at_limit;
	double *coef;
	double *sv;
	int sv_cap;
	wt_draw_point *hist;
	int since_frame, since_truth;
	uint16_t *image;	  /* WT_IMAGE_SIDE_MAX^2 */
	double *lat, *lat_sorted; /* WT_DRAW_LAT_WINDOW, ring of samples */
	int lat_next;
	uint8_t *act_flags;
	int sensor_side; /* pixels: lenslets x pixels per lenslet */
	wt_draw_info info;
};

static double nan_val(void)
{
	return (double)NAN;
}

int wt_draw_scene_create(const wt_config *cfg, wt_draw_scene **out,
			 wt_error *err)
{
	wt_draw_scene *s;
	double pix_um, focal_um, radius_um, *cx, *cy;
	int n, p, order, rc, n_sub;

	*out = NULL;
	s = calloc(1, sizeof(*s));
	if (!s) {
		return wt_error_set(err, -ENOMEM, "draw: out of memory");
	}
	n = (int)wt_config_int(cfg, WT_OPT_SENSOR_LENSLETS);
	p = (int)wt_config_int(cfg, WT_OPT_SENSOR_PIXELS_PER_LENSLET);
	s->info.obscuration = wt_config_double(cfg, WT_OPT_SENSOR_OBSCURATION);
	rc = wt_grid_lenslets(n, s->info.obscuration,
			      wt_config_double(cfg, WT_OPT_SENSOR_MIN_FILL),
			      &s->lens, err);
	if (rc < 0) {
		goto fail;
	}
	rc = wt_grid_actuators(
		(int)wt_config_int(cfg, WT_OPT_MIRROR_ACTUATORS),
		(enum wt_layout)wt_config_enum(cfg, WT_OPT_MIRROR_LAYOUT),
		wt_config_double(cfg, WT_OPT_MIRROR_PUPIL_PITCHES),
		wt_config_double(cfg, WT_OPT_MIRROR_MARGIN_PITCHES), &s->act,
		err);
	if (rc < 0) {
		goto fail;
	}
	s->n_sub = n_sub = s->lens->n_valid;
	s->n_act = s->act->n_valid;
	s->min_flux = wt_config_double(cfg, WT_OPT_SENSOR_MIN_FLUX);
	s->limit_low = wt_config_double(cfg, WT_OPT_MIRROR_LIMIT_LOW);
	s->limit_high = wt_config_double(cfg, WT_OPT_MIRROR_LIMIT_HIGH);

	pix_um = wt_config_double(cfg, WT_OPT_SENSOR_PIXEL_PITCH_UM);
	focal_um = 1000 * wt_config_double(cfg, WT_OPT_SENSOR_FOCAL_LENGTH_MM);
	radius_um = n * p * pix_um / 2;
	s->info.um_per_px = pix_um / focal_um * radius_um;
	s->info.wavelength_nm =
		wt_config_double(cfg, WT_OPT_SENSOR_WAVELENGTH_NM);

	/* Modes 2 .. (order + 1)(order + 2) / 2 with 2N >= 4 modes. */
	for (order = MAX_ORDER; order > 1; order--) {
		if (4 * ((order + 1) * (order + 2) / 2 - 1) <= 2 * n_sub) {
			break;
		}
	}
	s->info.j_first = 2;
	s->info.n_modes = (order + 1) * (order + 2) / 2 - 1;

	s->G = malloc(sizeof(double) * 2 * (size_t)n_sub *
		      (size_t)s->info.n_modes);
	s->g_valid = malloc(sizeof(double) * 2 * (size_t)n_sub *
			    (size_t)s->info.n_modes);
	s->s_valid = malloc(sizeof(double) * 2 * (size_t)n_sub);
	s->slopes = calloc(2 * (size_t)n_sub, sizeof(float));
	s->flux = calloc((size_t)n_sub, sizeof(float));
	s->command = calloc((size_t)s->n_act, sizeof(float));
	s->valid = calloc((size_t)n_sub, 1);
	s->at_limit = calloc((size_t)s->n_act, 1);
	s->coef = calloc((size_t)s->info.n_modes, sizeof(double));
	s->hist = calloc(WT_DRAW_HISTORY_MAX, sizeof(wt_draw_point));
	s->image = calloc(WT_IMAGE_SIDE_MAX * WT_IMAGE_SIDE_MAX, 2);
	s->lat = calloc(WT_DRAW_LAT_WINDOW, sizeof(double));
	s->lat_sorted = calloc(WT_DRAW_LAT_WINDOW, sizeof(double));
	s->act_flags = calloc((size_t)s->n_act, 1);
	cx = malloc(sizeof(double) * (size_t)n_sub);
	cy = malloc(sizeof(double) * (size_t)n_sub);
	if (!s->G || !s->g_valid || !s->s_valid || !s->slopes || !s->flux ||
	    !s->command || !s->valid || !s->at_limit || !s->coef || !s->hist ||
	    !s->image || !s->lat || !s->lat_sorted || !s->act_flags || !cx ||
	    !cy) {
		free(cx);
		free(cy);
		rc = wt_error_set(err, -ENOMEM, "draw: out of memory");
		goto fail;
	}
	memcpy(cx, s->lens->x, sizeof(double) * (size_t)n_sub);
	memcpy(cy, s->lens->y, sizeof(double) * (size_t)n_sub);
	rc = wt_zernike_slope_matrix(cx, cy, n_sub, s->lens->pitch / 2,
				     s->info.j_first, s->info.n_modes, s->G,
				     err);
	free(cx);
	free(cy);
	if (rc < 0) {
		goto fail;
	}

	s->info.lenslets = s->lens;
	s->info.actuators = s->act;
	s->info.slopes = s->slopes;
	s->info.flux = s->flux;
	s->info.command = s->command;
	s->info.valid = s->valid;
	s->info.at_limit = s->at_limit;
	s->info.coef_um = s->coef;
	s->info.hist = s->hist;
	s->info.image = s->image;
	s->info.act_flags = s->act_flags;
	s->info.pixel_um = pix_um;
	s->sensor_side = n * p;
	s->info.lat_median_us = s->info.lat_p99_us = nan_val();
	s->info.lat_max_us = nan_val();
	s->info.rms_nm = s->info.strehl = nan_val();
	s->info.latency_us = s->info.rms_px = nan_val();
	s->info.truth_rms_nm = s->info.truth_strehl = nan_val();
	s->info.status.frame_rate_hz = nan_val();
	s->info.status.latency_median_us = nan_val();
	s->info.status.latency_max_us = nan_val();
	s->info.status.residual_rms_px = nan_val();
	s->info.status.gain = s->info.status.leak = nan_val();
	s->info.status.condition = nan_val();
	s->since_frame = s->since_truth = FRESH_SAMPLES + 1;
	*out = s;
	return 0;
fail:
	wt_draw_scene_destroy(s);
	return rc;
}

void wt_draw_scene_destroy(wt_draw_scene *s)
{
	if (!s) {
		return;
	}
	wt_grid_destroy(s->lens);
	wt_grid_destroy(s->act);
	free(s->G);
	free(s->g_valid);
	free(s->s_valid);
	free(s->slopes);
	free(s->flux);
	free(s->command);
	free(s->valid);
	free(s->at_limit);
	free(s->coef);
	free(s->sv);
	free(s->hist);
	free(s->image);
	free(s->lat);
	free(s->lat_sorted);
	free(s->act_flags);
	free(s);
}

const wt_draw_info *wt_draw_scene_info(const wt_draw_scene *s)
{
	return &s->info;
}

/* Value of the fitted wavefront at (x, y), um. */
static double wavefront_um(const wt_draw_scene *s, double x, double y)
{
	double w = 0;

	for (int c = 0; c < s->info.n_modes; c++) {
		w += s->coef[c] * wt_zernike_xy(s->info.j_first + c, x, y);
	}
	return w;
}

static bool in_pupil(const wt_draw_scene *s, double x, double y)
{
	double r2 = x * x + y * y, o = s->info.obscuration;

	return r2 <= 1 && r2 >= o * o;
}

/* RMS over the pupil: from the coefficients for a clear disk (the modes are
 * orthonormal there, Noll 1976), numerically on an annulus. */
static double rms_um(const wt_draw_scene *s)
{
	double sum = 0, sum2 = 0;
	int n = 0;

	if (s->info.obscuration <= 0) {
		for (int c = 0; c < s->info.n_modes; c++) {
			sum2 += s->coef[c] * s->coef[c];
		}
		return sqrt(sum2);
	}
	for (int j = 0; j < 64; j++) {
		for (int i = 0; i < 64; i++) {
			double x = -1 + (2 * i + 1) / 64.0;
			double y = -1 + (2 * j + 1) / 64.0;
			double w;

			if (!in_pupil(s, x, y)) {
				continue;
			}
			w = wavefront_um(s, x, y);
			sum += w;
			sum2 += w * w;
			n++;
		}
	}
	return n > 0 ? sqrt(fmax(sum2 / n - (sum / n) * (sum / n), 0)) : 0;
}

static void fit_frame(wt_draw_scene *s)
{
	int nm = s->info.n_modes, nv = 0, rc;
	size_t row = sizeof(double) * (size_t)nm;

	for (int k = 0; k < s->n_sub; k++) {
		if (s->valid[k]) {
			nv++;
		}
	}
	s->info.fit_ok = false;
	s->info.rms_nm = s->info.strehl = nan_val();
	if (2 * nv < nm) {
		return;
	}
	for (int k = 0, r = 0; k < s->n_sub; k++) {
		if (!s->valid[k]) {
			continue;
		}
		memcpy(s->g_valid + (size_t)r * (size_t)nm,
		       s->G + (size_t)k * (size_t)nm, row);
		memcpy(s->g_valid + (size_t)(nv + r) * (size_t)nm,
		       s->G + (size_t)(s->n_sub + k) * (size_t)nm, row);
		s->s_valid[r] = s->slopes[k] * s->info.um_per_px;
		s->s_valid[nv + r] =
			s->slopes[s->n_sub + k] * s->info.um_per_px;
		r++;
	}
	rc = wt_zernike_fit(s->g_valid, 2 * nv, nm, s->s_valid, s->coef, NULL);
	if (rc < 0) {
		return;
	}
	s->info.fit_ok = true;
	s->info.rms_nm = 1000 * rms_um(s);
	/* Marechal: S = exp(-(2 pi sigma / lambda)^2). */
	s->info.strehl =
		exp(-pow(2 * M_PI * s->info.rms_nm / s->info.wavelength_nm, 2));
}

int wt_draw_scene_frame(wt_draw_scene *s, const void *rec, size_t len,
			wt_error *err)
{
	const uint8_t *b = rec;
	size_t n = (size_t)s->n_sub, a = (size_t)s->n_act;
	wt_frame_record h;

	if (len < WT_FRAME_HEADER_BYTES) {
		s->info.bad_records++;
		return wt_error_set(err, -EPROTO, "frame record: %zu bytes",
				    len);
	}
	memcpy(&h, b, sizeof(h));
	if (memcmp(h.magic, WT_FRAME_MAGIC, 4) != 0 ||
	    h.version != WT_FRAME_VERSION || h.n_subaps != n || h.n_act != a ||
	    len != wt_frame_record_bytes(n, a)) {
		s->info.bad_records++;
		return wt_error_set(err, -EPROTO,
				    "frame record does not match this "
				    "geometry (%u subapertures, %u actuators, "
				    "%zu bytes; expected %zu, %zu)",
				    h.n_subaps, h.n_act, len, n, a);
	}
	memcpy(s->slopes, b + WT_FRAME_HEADER_BYTES, 8 * n);
	memcpy(s->flux, b + WT_FRAME_HEADER_BYTES + 8 * n, 4 * n);
	memcpy(s->command, b + WT_FRAME_HEADER_BYTES + 12 * n, 4 * a);
	for (size_t k = 0; k < n; k++) {
		bool ok = isfinite(s->slopes[k]) && isfinite(s->slopes[n + k]);

		/* The record counts invalid subapertures but does not name
		 * them: they are the ones under the flux threshold. */
		if (h.n_invalid > 0 && !(h.flags & WT_FRAME_SLOPES_IN) &&
		    !(s->flux[k] >= s->min_flux)) {
			ok = false;
		}
		s->valid[k] = ok;
	}
	s->info.n_at_limit = 0;
	for (size_t k = 0; k < a; k++) {
		float c = s->command[k];

		s->at_limit[k] =
			c >= s->limit_high - 1e-6 || c <= s->limit_low + 1e-6;
		s->info.n_at_limit += s->at_limit[k];
	}
	s->info.have_frame = true;
	s->info.records++;
	s->info.frame_id = h.frame_id;
	s->info.state = h.state;
	s->info.latency_us = h.send_ns >= h.recv_ns
				     ? (double)(h.send_ns - h.recv_ns) / 1e3
				     : nan_val();
	s->info.n_invalid = h.n_invalid;
	s->info.n_clipped = h.n_clipped;
	s->info.flags = h.flags;
	s->info.rms_px = h.residual_rms;
	s->since_frame = 0;
	fit_frame(s);
	return 0;
}

static int cmp_double(const void *a, const void *b)
{
	double x = *(const double *)a, y = *(const double *)b;

	return (x > y) - (x < y);
}

/* JSON helpers: a member's number (NaN when absent or not a number). */
static double jnum(const char *js, const wt_jtok *t, int obj, const char *key)
{
	int v = wt_jsonp_member(js, t, obj, key);
	int ok;
	double x;

	if (v < 0) {
		return nan_val();
	}
	x = wt_jsonp_number(js, &t[v], &ok);
	return ok == 0 ? x : nan_val();
}

static long long jint(const char *js, const wt_jtok *t, int obj,
		      const char *key)
{
	double x = jnum(js, t, obj, key);

	return isfinite(x) ? (long long)x : 0;
}

static void jstr(const char *js, const wt_jtok *t, int obj, const char *key,
		 char *out, size_t len)
{
	int v = wt_jsonp_member(js, t, obj, key);

	out[0] = '\0';
	if (v >= 0 && t[v].type == WT_JSON_STRING &&
	    wt_jsonp_string(js, &t[v], out, len) < 0) {
		out[0] = '\0';
	}
}

/* Parse js into a fresh token array; returns the count or < 0. */
static int jparse(const char *js, size_t len, wt_jtok **toks, wt_error *err)
{
	int max = (int)(len / 2 + 8);

	*toks = NULL;
	if (len > (size_t)1 << 26) {
		return wt_error_set(err, -EINVAL, "JSON text too long");
	}
	*toks = malloc(sizeof(wt_jtok) * (size_t)max);
	if (!*toks) {
		return wt_error_set(err, -ENOMEM, "draw: out of memory");
	}
	return wt_jsonp_parse(js, len, *toks, max, err);
}

static void take_singular_values(wt_draw_scene *s, const char *js,
				 const wt_jtok *t, int arr)
{
	int n, i;

	if (arr < 0 || t[arr].type != WT_JSON_ARRAY) {
		return;
	}
	n = t[arr].size;
	if (n > s->sv_cap) {
		double *p = realloc(s->sv, sizeof(double) * (size_t)n);

		if (!p) {
			return;
		}
		s->sv = p;
		s->sv_cap = n;
	}
	i = arr + 1;
	for (int k = 0; k < n; k++) {
		int ok;
		double x = wt_jsonp_number(js, &t[i], &ok);

		s->sv[k] = ok == 0 ? x : nan_val();
		i = t[i].next;
	}
	s->info.n_sv = n;
	s->info.sv = s->sv;
}

/*
 * Per-actuator flags: every member "KIND_actuators" of the object obj
 * holding an array of numbers is a kind of flag and the actuators it
 * names.  Anything else (other members, other shapes, indices out of
 * range) is ignored, so that fuller reports still read.  Replaces the
 * flags kept only when the object has at least one such member.
 */
static void take_flags(wt_draw_scene *s, const char *js, const wt_jtok *t,
		       int obj)
{
	static const char suffix[] = "_actuators";
	const size_t sl = sizeof(suffix) - 1;
	int kinds = 0, m;

	if (obj < 0 || t[obj].type != WT_JSON_OBJECT) {
		return;
	}
	m = obj + 1;
	for (int k = 0; k < t[obj].size; k++) {
		int v = t[m].next;
		char key[64];
		int kl = wt_jsonp_string(js, &t[m], key, sizeof(key));

		if (kl > (int)sl && strcmp(key + kl - sl, suffix) == 0 &&
		    t[v].type == WT_JSON_ARRAY && kinds < WT_DRAW_FLAG_KINDS) {
			wt_draw_info *in = &s->info;
			int e = v + 1, count = 0;

			if (kinds == 0) {
				memset(s->act_flags, 0, (size_t)s->n_act);
			}
			key[kl - sl] = '\0';
			key[sizeof(in->flag_names[kinds]) - 1] = '\0';
			memcpy(in->flag_names[kinds], key, strlen(key) + 1);
			for (int i = 0; i < t[v].size; i++) {
				int ok;
				double x = wt_jsonp_number(js, &t[e], &ok);

				if (ok == 0 && x >= 0 && x < s->n_act &&
				    x == floor(x) &&
				    !(s->act_flags[(int)x] & (1u << kinds))) {
					s->act_flags[(int)x] |=
						(uint8_t)(1u << kinds);
					count++;
				}
				e = t[e].next;
			}
			in->flag_counts[kinds] = count;
			kinds++;
		}
		m = t[v].next;
	}
	if (kinds > 0) {
		s->info.have_flags = true;
		s->info.n_flag_kinds = kinds;
	}
}

int wt_draw_scene_status(wt_draw_scene *s, const char *js, size_t len,
			 wt_error *err)
{
	wt_draw_status *st = &s->info.status;
	wt_jtok *t;
	int n, o, v, c;

	n = jparse(js, len, &t, err);
	if (n < 0) {
		free(t);
		return n;
	}
	o = 0;
	v = wt_jsonp_member(js, t, 0, "result");
	if (v >= 0 && wt_jsonp_member(js, t, 0, "ok") >= 0) {
		o = v;
	}
	if (t[o].type != WT_JSON_OBJECT ||
	    wt_jsonp_member(js, t, o, "state") < 0) {
		free(t);
		return wt_error_set(err, -EINVAL, "not a status object");
	}
	st->known = true;
	jstr(js, t, o, "state", st->state, sizeof(st->state));
	jstr(js, t, o, "fault", st->fault, sizeof(st->fault));
	st->frame_rate_hz = jnum(js, t, o, "frame_rate_hz");
	v = wt_jsonp_member(js, t, o, "latency_us");
	st->latency_median_us = jnum(js, t, v, "median");
	st->latency_max_us = jnum(js, t, v, "max");
	st->residual_rms_px = jnum(js, t, o, "residual_rms");
	st->gain = jnum(js, t, o, "gain");
	st->leak = jnum(js, t, o, "leak");
	st->frames = jint(js, t, o, "frames");
	st->modes = (int)jint(js, t, o, "modes");
	st->invalid_subapertures = (int)jint(js, t, o, "invalid_subapertures");
	st->clipped_actuators = (int)jint(js, t, o, "clipped_actuators");
	c = wt_jsonp_member(js, t, o, "counts");
	st->dropped = jint(js, t, c, "dropped");
	st->refused = jint(js, t, c, "refused");
	st->stale = jint(js, t, c, "stale");
	st->bad_dimensions = jint(js, t, c, "bad_dimensions");
	st->rejected = jint(js, t, c, "rejected_updates");
	st->send_failed = jint(js, t, c, "send_failed");
	st->telemetry_dropped = jint(js, t, c, "telemetry_dropped");
	st->clipped_frames = jint(js, t, c, "clipped_frames");
	st->received = jint(js, t, c, "received");
	st->wrong_kind = jint(js, t, c, "wrong_kind");
	st->faults = jint(js, t, c, "faults");
	c = wt_jsonp_member(js, t, o, "calibration");
	take_flags(s, js, t, c);
	st->recommended = (int)jint(js, t, c, "recommended");
	st->condition = jnum(js, t, c, "condition");
	take_singular_values(s, js, t,
			     wt_jsonp_member(js, t, c, "singular_values"));
	free(t);
	return 0;
}

int wt_draw_scene_event(wt_draw_scene *s, const char *js, size_t len)
{
	char name[32], key[64];
	wt_jtok *t;
	double v;
	int n;

	n = jparse(js, len, &t, NULL);
	if (n < 0 || t[0].type != WT_JSON_OBJECT) {
		free(t);
		return -EINVAL;
	}
	jstr(js, t, 0, "event", name, sizeof(name));
	if (strcmp(name, "config") == 0) {
		jstr(js, t, 0, "key", key, sizeof(key));
		v = jnum(js, t, 0, "value");
		if (isfinite(v) && strcmp(key, "sensor.min_flux") == 0) {
			s->min_flux = v;
		} else if (isfinite(v) &&
			   strcmp(key, "mirror.limit_low") == 0) {
			s->limit_low = v;
		} else if (isfinite(v) &&
			   strcmp(key, "mirror.limit_high") == 0) {
			s->limit_high = v;
		}
	} else if (strcmp(name, "calibration") == 0) {
		take_singular_values(
			s, js, t, wt_jsonp_member(js, t, 0, "singular_values"));
		s->info.status.recommended = (int)jint(js, t, 0, "recommended");
		s->info.status.condition = jnum(js, t, 0, "condition");
		take_flags(s, js, t, 0);
	}
	free(t);
	return name[0] ? 0 : -EINVAL;
}

int wt_draw_scene_image(wt_draw_scene *s, const void *rec, size_t len,
			wt_error *err)
{
	wt_image_record h;
	const uint8_t *px;
	int rc = wt_image_decode(rec, len, &h, &px, err);

	if (rc == 0 && (h.sensor_width != (uint32_t)s->sensor_side ||
			h.sensor_height != (uint32_t)s->sensor_side)) {
		rc = wt_error_set(err, -EPROTO,
				  "image of a %ux%u sensor, expected %dx%d",
				  h.sensor_width, h.sensor_height,
				  s->sensor_side, s->sensor_side);
	}
	if (rc < 0) {
		s->info.bad_records++;
		return rc;
	}
	memcpy(s->image, px, 2 * (size_t)h.width * h.height);
	s->info.image_max = 0;
	for (size_t k = 0; k < (size_t)h.width * h.height; k++) {
		s->image[k] = (uint16_t)lroundf((float)s->image[k] * h.scale);
		s->info.image_max = fmax(s->info.image_max, s->image[k]);
	}
	s->info.have_image = true;
	s->info.image_frame = h.frame_id;
	s->info.image_w = (int)h.width;
	s->info.image_h = (int)h.height;
	s->info.image_bin = (int)h.bin;
	s->info.sensor_w = (int)h.sensor_width;
	s->info.sensor_h = (int)h.sensor_height;
	return 0;
}

void wt_draw_scene_timing(wt_draw_scene *s, const void *rec, size_t len)
{
	wt_draw_info *in = &s->info;
	wt_frame_record h;
	double us;
	int bin;

	if (len < WT_FRAME_HEADER_BYTES) {
		return;
	}
	memcpy(&h, rec, sizeof(h));
	if (memcmp(h.magic, WT_FRAME_MAGIC, 4) != 0 ||
	    h.version != WT_FRAME_VERSION || h.send_ns < h.recv_ns) {
		return;
	}
	us = (double)(h.send_ns - h.recv_ns) / 1e3;
	if (in->lat_n == WT_DRAW_LAT_WINDOW) {
		double old = s->lat[s->lat_next];

		bin = old < 1 ? 0 : (int)floor(10 * log10(old));
		in->lat_counts[bin < WT_DRAW_LAT_BINS ? bin
						      : WT_DRAW_LAT_BINS - 1]--;
	} else {
		in->lat_n++;
	}
	s->lat[s->lat_next] = us;
	s->lat_next = (s->lat_next + 1) % WT_DRAW_LAT_WINDOW;
	bin = us < 1 ? 0 : (int)floor(10 * log10(us));
	in->lat_counts[bin < WT_DRAW_LAT_BINS ? bin : WT_DRAW_LAT_BINS - 1]++;
}

/* Median, 99th percentile (nearest rank) and maximum of the window. */
static void latency_stats(wt_draw_scene *s)
{
	wt_draw_info *in = &s->info;
	int n = in->lat_n;

	if (n == 0) {
		return;
	}
	memcpy(s->lat_sorted, s->lat, sizeof(double) * (size_t)n);
	qsort(s->lat_sorted, (size_t)n, sizeof(double), cmp_double);
	in->lat_median_us =
		n % 2 ? s->lat_sorted[n / 2]
		      : 0.5 * (s->lat_sorted[n / 2 - 1] + s->lat_sorted[n / 2]);
	in->lat_p99_us = s->lat_sorted[(int)ceil(0.99 * n) - 1];
	in->lat_max_us = s->lat_sorted[n - 1];
}

void wt_draw_scene_truth(wt_draw_scene *s, uint64_t frame, double rms_nm,
			 double strehl)
{
	s->info.have_truth = true;
	s->info.truth_frame = frame;
	s->info.truth_rms_nm = rms_nm;
	s->info.truth_strehl = strehl;
	s->since_truth = 0;
}

void wt_draw_scene_sample(wt_draw_scene *s, double t_s)
{
	wt_draw_point *p;
	bool frame = s->since_frame <= FRESH_SAMPLES;
	bool truth = s->since_truth <= FRESH_SAMPLES;

	if (s->info.n_hist == WT_DRAW_HISTORY_MAX) {
		memmove(s->hist, s->hist + 1,
			sizeof(*s->hist) * (WT_DRAW_HISTORY_MAX - 1));
		s->info.n_hist--;
	}
	p = &s->hist[s->info.n_hist++];
	p->t_s = t_s;
	p->rms_nm = frame ? s->info.rms_nm : nan_val();
	p->strehl = frame ? s->info.strehl : nan_val();
	p->truth_rms_nm = truth ? s->info.truth_rms_nm : nan_val();
	p->truth_strehl = truth ? s->info.truth_strehl : nan_val();
	if (s->since_frame <= FRESH_SAMPLES) {
		s->since_frame++;
	}
	if (s->since_truth <= FRESH_SAMPLES) {
		s->since_truth++;
	}
	latency_stats(s);
}

int wt_draw_scene_map(const wt_draw_scene *s, int m, bool extend, float *out,
		      double *max_abs)
{
	double big = 0;

	if (m < 2 || m > 1024) {
		return -EINVAL;
	}
	if (!s->info.have_frame || !s->info.fit_ok) {
		return -ENODATA;
	}
	for (int j = 0; j < m; j++) {
		for (int i = 0; i < m; i++) {
			double x = -1 + (2 * i + 1) / (double)m;
			double y = -1 + (2 * j + 1) / (double)m;
			bool inside = in_pupil(s, x, y);
			double w;

			if (!inside && !extend) {
				out[j * m + i] = (float)nan_val();
				continue;
			}
			w = 1000 * wavefront_um(s, x, y);
			out[j * m + i] = (float)w;
			if (inside && fabs(w) > big) {
				big = fabs(w);
			}
		}
	}
	if (max_abs) {
		*max_abs = big;
	}
	return 0;
}

/* --- panels --------------------------------------------------------------- */

#define PIC_W	 WT_DRAW_WIDTH
#define PIC_H	 WT_DRAW_HEIGHT
#define HEADER_H 56
#define PANEL_W	 408
#define PANEL_H	 384
#define GAP	 8

struct ctx {
	struct cv *c;
	const wt_draw_scene *s;
	const wt_draw_info *in;
	uint8_t maps[2][WT_CMAP_SIZE][3];
};

static uint32_t cmap_rgb(const struct ctx *x, enum wt_cmap map, double t)
{
	const uint8_t *p;

	if (!isfinite(t)) {
		return GREY;
	}
	t = t < 0 ? 0 : (t > 1 ? 1 : t);
	p = x->maps[map][(int)lround(t * (WT_CMAP_SIZE - 1))];
	return (uint32_t)p[0] << 16 | (uint32_t)p[1] << 8 | p[2];
}

static double nice_ceil(double v)
{
	return wt_draw_nice_ceil(v);
}

double wt_draw_nice_ceil(double v)
{
	static const double steps[] = {1, 2, 2.5, 5, 10};
	double p;

	if (!(v > 0) || !isfinite(v)) {
		return 1;
	}
	p = pow(10, floor(log10(v)));
	for (size_t k = 0; k < sizeof(steps) / sizeof(steps[0]); k++) {
		if (steps[k] * p >= v * (1 - 1e-9)) {
			return steps[k] * p;
		}
	}
	return 10 * p;
}

/* A number in `digits` significant digits ("n/a" when not finite); plain
 * notation from 1e-3 to 1e5, exponent notation outside. */
static const char *num(char *buf, size_t len, double v, int digits)
{
	double a = fabs(v);

	if (!isfinite(v)) {
		snprintf(buf, len, "n/a");
	} else if (a != 0 && (a >= 1e5 || a < 1e-3)) {
		snprintf(buf, len, "%.*e", digits - 1, v);
	} else {
		/* %g would write 5000 as 5e+03 with 3 digits. */
		int whole = a >= 1 ? (int)floor(log10(a)) + 1 : 1;

		snprintf(buf, len, "%.*g", whole > digits ? whole : digits, v);
	}
	return buf;
}

static void text(struct ctx *x, double px, double py, int anchor, int size,
		 uint32_t col, const char *fmt, ...)
	__attribute__((format(printf, 7, 8)));

static void text(struct ctx *x, double px, double py, int anchor, int size,
		 uint32_t col, const char *fmt, ...)
{
	char buf[256];
	va_list ap;

	va_start(ap, fmt);
	vsnprintf(buf, sizeof(buf), fmt, ap);
	va_end(ap);
	x->c->ops->text(x->c, px, py, anchor, size, col, buf);
}

static void box(struct ctx *x, double px, double py, double w, double h,
		uint32_t col)
{
	const struct cv_ops *o = x->c->ops;

	o->line(x->c, px, py, px + w, py, col, 1);
	o->line(x->c, px + w, py, px + w, py + h, col, 1);
	o->line(x->c, px + w, py + h, px, py + h, col, 1);
	o->line(x->c, px, py + h, px, py, col, 1);
}

static void arrow(struct ctx *x, double x0, double y0, double x1, double y1,
		  uint32_t col, double head)
{
	double len = hypot(x1 - x0, y1 - y0), ux, uy, h;
	const double ca = cos(0.45), sa = sin(0.45);

	if (len < 0.75) {
		x->c->ops->disc(x->c, x0, y0, 0.9, col);
		return;
	}
	x->c->ops->line(x->c, x0, y0, x1, y1, col, 1.2);
	ux = (x0 - x1) / len;
	uy = (y0 - y1) / len;
	h = fmin(head, 0.45 * len);
	x->c->ops->line(x->c, x1, y1, x1 + h * (ux * ca - uy * sa),
			y1 + h * (ux * sa + uy * ca), col, 1.2);
	x->c->ops->line(x->c, x1, y1, x1 + h * (ux * ca + uy * sa),
			y1 + h * (-ux * sa + uy * ca), col, 1.2);
}

/* A vertical colour bar from lo (bottom) to hi (top), labelled. */
static void colorbar(struct ctx *x, double px, double py, double h,
		     enum wt_cmap map, double lo, double hi, const char *unit)
{
	uint8_t img[WT_CMAP_SIZE * 4];
	char a[32], b[32], m[32];

	for (int k = 0; k < WT_CMAP_SIZE; k++) {
		const uint8_t *p = x->maps[map][WT_CMAP_SIZE - 1 - k];

		memcpy(img + 4 * k, p, 3);
		img[4 * k + 3] = 255;
	}
	x->c->ops->image(x->c, px, py, 12, h, img, 1, WT_CMAP_SIZE);
	box(x, px, py, 12, h, GREY);
	text(x, px + 16, py + 7, LEFT, 1, INK, "%s", num(a, sizeof(a), hi, 3));
	text(x, px + 16, py + h / 2 + 3, LEFT, 1, INK, "%s",
	     num(m, sizeof(m), (lo + hi) / 2, 3));
	text(x, px + 16, py + h, LEFT, 1, INK, "%s", num(b, sizeof(b), lo, 3));
	text(x, px, py - 6, LEFT, 1, INK, "%s", unit);
}

static void panel(struct ctx *x, double px, double py, const char *title)
{
	x->c->ops->rect(x->c, px, py, PANEL_W, PANEL_H, PAPER);
	box(x, px, py, PANEL_W, PANEL_H, PALE);
	x->c->ops->text(x->c, px + 12, py + 24, LEFT, 2, INK, title);
}

/* Panel geometry: the square map area and the caption lines. */
#define MAP_X	  12
#define MAP_Y	  40
#define MAP_S	  304
#define BAR_X	  (MAP_X + MAP_S + 14)
#define CAPTION_1 (PANEL_H - 22)
#define CAPTION_2 (PANEL_H - 9)

static void no_data(struct ctx *x, double px, double py, const char *why)
{
	text(x, px + MAP_X + MAP_S / 2.0, py + MAP_Y + MAP_S / 2.0, MIDDLE, 1,
	     GREY, "%s", why);
}

/*
 * A length bar at the lower left of a map of the sensor (the lenslet grid
 * spans the sensor): a nice length of about a tenth of its width, on a
 * white label so that it reads over any colour.
 */
static void length_bar(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	double total_um = x->s->sensor_side * in->pixel_um, l_um, w;
	char lab[32];

	if (!(total_um > 0)) {
		return;
	}
	l_um = nice_ceil(0.1 * total_um);
	w = l_um / total_um * MAP_S;
	if (l_um >= 1000) {
		snprintf(lab, sizeof(lab), "%g mm", l_um / 1000);
	} else {
		snprintf(lab, sizeof(lab), "%g um", l_um);
	}
	x->c->ops->rect(x->c, px + MAP_X + 2, py + MAP_Y + MAP_S - 24,
			fmax(w, text_width(lab, 1)) + 8, 22, PAPER);
	x->c->ops->rect(x->c, px + MAP_X + 6, py + MAP_Y + MAP_S - 8, w, 3,
			INK);
	x->c->ops->text(x->c, px + MAP_X + 6, py + MAP_Y + MAP_S - 12, LEFT, 1,
			INK, lab);
}

/* Lenslet cells: pupil coordinates to pixels (the grid spans the pupil). */
static void cell_rect(const struct ctx *x, int k, double px, double py,
		      double *cx, double *cy, double *side)
{
	const wt_grid *g = x->in->lenslets;
	double half = MAP_S / 2.0;

	*cx = px + MAP_X + half + g->x[k] * half;
	*cy = py + MAP_Y + half + g->y[k] * half;
	*side = g->pitch * half;
}

static void panel_slopes(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	int n = in->lenslets->n_valid;
	double big = 0, ref, scale, cx, cy, side;

	panel(x, px, py, "Residual slopes");
	for (int k = 0; k < n; k++) {
		bool ok = !in->have_frame || in->valid[k];

		cell_rect(x, k, px, py, &cx, &cy, &side);
		x->c->ops->rect(x->c, cx - side / 2 + 0.5, cy - side / 2 + 0.5,
				side - 1, side - 1, ok ? 0xf2f2f2u : 0xc8c8c8u);
		if (in->have_frame && in->valid[k]) {
			big = fmax(big,
				   hypot(in->slopes[k], in->slopes[n + k]));
		}
	}
	x->c->ops->ring(x->c, px + MAP_X + MAP_S / 2.0,
			py + MAP_Y + MAP_S / 2.0, MAP_S / 2.0, GREY, 1);
	if (!in->have_frame) {
		no_data(x, px, py, "no frame record yet");
		return;
	}
	/* The longest arrow is at most 0.9 of a cell. */
	ref = nice_ceil(big > 0 ? big : 0.1);
	cell_rect(x, 0, px, py, &cx, &cy, &side);
	scale = 0.9 * side / ref;
	for (int k = 0; k < n; k++) {
		if (!in->valid[k]) {
			continue;
		}
		cell_rect(x, k, px, py, &cx, &cy, &side);
		arrow(x, cx, cy, cx + in->slopes[k] * scale,
		      cy + in->slopes[n + k] * scale, INK, 0.3 * side);
	}
	/* Scale bar: one arrow of the reference length. */
	length_bar(x, px, py);
	arrow(x, px + BAR_X, py + MAP_Y + 30, px + BAR_X + ref * scale,
	      py + MAP_Y + 30, INK, 0.3 * side);
	text(x, px + BAR_X, py + MAP_Y + 14, LEFT, 1, INK, "scale");
	text(x, px + BAR_X, py + MAP_Y + 48, LEFT, 1, INK, "%g px", ref);
	x->c->ops->rect(x->c, px + BAR_X, py + MAP_Y + 70, 10, 10, 0xc8c8c8u);
	text(x, px + BAR_X + 14, py + MAP_Y + 79, LEFT, 1, INK, "invalid");
	text(x, px + 12, py + CAPTION_1, LEFT, 1, INK,
	     "frame %llu: %d subapertures, %u invalid",
	     (unsigned long long)in->frame_id, n, in->n_invalid);
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "s - reference - offset; x right, y down");
}

static void panel_wavefront(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	enum { M = 128 };
	float *map;
	uint8_t *img;
	double big, top;
	char a[32], b[32];

	panel(x, px, py, "Residual wavefront");
	x->c->ops->ring(x->c, px + MAP_X + MAP_S / 2.0,
			py + MAP_Y + MAP_S / 2.0, MAP_S / 2.0, GREY, 1);
	map = malloc(sizeof(float) * M * M);
	img = malloc(4 * M * M);
	if (!map || !img || wt_draw_scene_map(x->s, M, false, map, &big) < 0) {
		no_data(x, px, py,
			in->have_frame ? "Zernike fit failed"
				       : "no frame record yet");
		free(map);
		free(img);
		return;
	}
	top = nice_ceil(big > 0 ? big : 1);
	for (int k = 0; k < M * M; k++) {
		uint32_t c =
			cmap_rgb(x, WT_CMAP_COOLWARM, (map[k] / top + 1) / 2);

		img[4 * k] = (uint8_t)(c >> 16);
		img[4 * k + 1] = (uint8_t)(c >> 8);
		img[4 * k + 2] = (uint8_t)c;
		img[4 * k + 3] = isnan(map[k]) ? 0 : 255;
	}
	x->c->ops->image(x->c, px + MAP_X, py + MAP_Y, MAP_S, MAP_S, img, M, M);
	free(map);
	free(img);
	length_bar(x, px, py);
	colorbar(x, px + BAR_X, py + MAP_Y + 14, MAP_S - 28, WT_CMAP_COOLWARM,
		 -top, top, "nm");
	text(x, px + 12, py + CAPTION_1, LEFT, 1, INK,
	     "RMS %s nm   Strehl %s (Marechal, %g nm)",
	     num(a, sizeof(a), in->rms_nm, 4), num(b, sizeof(b), in->strehl, 3),
	     in->wavelength_nm);
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "least-squares fit of Zernike modes %d-%d to the slopes",
	     in->j_first, in->j_first + in->n_modes - 1);
}

static void panel_command(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	const wt_grid *g = in->actuators;
	double half = MAP_S / 2.0, rpx, ox = px + MAP_X + half;
	double oy = py + MAP_Y + half;

	panel(x, px, py, "Mirror command");
	/* Pupil radius in pixels so that the whole grid fits. */
	rpx = half / fmax(1, g->n * g->pitch / 2);
	x->c->ops->ring(x->c, ox, oy, rpx, GREY, 1);
	for (int k = 0; k < g->n_valid; k++) {
		double cx = ox + g->x[k] * rpx, cy = oy + g->y[k] * rpx;
		double r = 0.42 * g->pitch * rpx;
		double v = in->have_frame ? in->command[k] : nan_val();

		x->c->ops->disc(x->c, cx, cy, r,
				in->have_frame ? cmap_rgb(x, WT_CMAP_COOLWARM,
							  (v + 1) / 2)
					       : PALE);
		if (in->have_frame && in->at_limit[k]) {
			x->c->ops->ring(x->c, cx, cy, r, INK, 2.5);
		}
	}
	colorbar(x, px + BAR_X, py + MAP_Y + 14, MAP_S - 100, WT_CMAP_COOLWARM,
		 -1, 1, "stroke");
	x->c->ops->disc(x->c, px + BAR_X + 6, py + MAP_Y + MAP_S - 50, 5, PALE);
	x->c->ops->ring(x->c, px + BAR_X + 6, py + MAP_Y + MAP_S - 50, 5, INK,
			2.5);
	text(x, px + BAR_X, py + MAP_Y + MAP_S - 34, LEFT, 1, INK, "at a");
	text(x, px + BAR_X, py + MAP_Y + MAP_S - 24, LEFT, 1, INK, "limit");
	if (!in->have_frame) {
		no_data(x, px, py, "no frame record yet");
		return;
	}
	text(x, px + 12, py + CAPTION_1, LEFT, 1, INK,
	     "%d actuators, %d at a limit", g->n_valid, in->n_at_limit);
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "normalised stroke, limits [%g, %g]", x->s->limit_low,
	     x->s->limit_high);
}

static void panel_flux(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	int n = in->lenslets->n_valid;
	double big = 0, top, cx, cy, side;

	panel(x, px, py, "Flux per subaperture");
	for (int k = 0; k < n && in->have_frame; k++) {
		big = fmax(big, in->flux[k]);
	}
	top = nice_ceil(big > 0 ? big : 1);
	for (int k = 0; k < n; k++) {
		cell_rect(x, k, px, py, &cx, &cy, &side);
		x->c->ops->rect(x->c, cx - side / 2, cy - side / 2, side, side,
				in->have_frame ? cmap_rgb(x, WT_CMAP_VIRIDIS,
							  in->flux[k] / top)
					       : PALE);
		if (in->have_frame && !in->valid[k]) {
			x->c->ops->line(x->c, cx - side / 3, cy - side / 3,
					cx + side / 3, cy + side / 3, ALERT,
					1.5);
			x->c->ops->line(x->c, cx - side / 3, cy + side / 3,
					cx + side / 3, cy - side / 3, ALERT,
					1.5);
		}
	}
	x->c->ops->ring(x->c, px + MAP_X + MAP_S / 2.0,
			py + MAP_Y + MAP_S / 2.0, MAP_S / 2.0, GREY, 1);
	colorbar(x, px + BAR_X, py + MAP_Y + 14, MAP_S - 28, WT_CMAP_VIRIDIS, 0,
		 top, "counts");
	if (!in->have_frame) {
		no_data(x, px, py, "no frame record yet");
	} else if (in->flags & WT_FRAME_SLOPES_IN) {
		no_data(x, px, py, "the driver sends slopes: no flux");
	}
	text(x, px + 12, py + CAPTION_1, LEFT, 1, INK,
	     "no sensor image (daemon.image_hz 0, or slopes");
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "from the driver). x: under min_flux (%g)", x->s->min_flux);
}

/* The sensor image (viridis, counts) under the subaperture grid: valid
 * subapertures outlined, invalid ones crossed out.  Without an image: the
 * flux per subaperture. */
static void panel_image(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	int w = in->image_w, h = in->image_h, n = in->lenslets->n_valid;
	double top, cx, cy, side, sw, sh;
	uint8_t *img;

	if (!in->have_image) {
		panel_flux(x, px, py);
		length_bar(x, px, py);
		return;
	}
	panel(x, px, py, "Sensor image");
	top = nice_ceil(in->image_max > 0 ? in->image_max : 1);
	img = malloc(4 * (size_t)w * (size_t)h);
	if (img) {
		for (int k = 0; k < w * h; k++) {
			uint32_t c = cmap_rgb(x, WT_CMAP_VIRIDIS,
					      in->image[k] / top);

			img[4 * k] = (uint8_t)(c >> 16);
			img[4 * k + 1] = (uint8_t)(c >> 8);
			img[4 * k + 2] = (uint8_t)c;
			img[4 * k + 3] = 255;
		}
		/* The last column and row may stand for fewer pixels. */
		sw = MAP_S * (double)w * in->image_bin / in->sensor_w;
		sh = MAP_S * (double)h * in->image_bin / in->sensor_h;
		x->c->ops->image(x->c, px + MAP_X, py + MAP_Y, sw, sh, img, w,
				 h);
		free(img);
	}
	for (int k = 0; k < n; k++) {
		bool ok = !in->have_frame || in->valid[k];

		cell_rect(x, k, px, py, &cx, &cy, &side);
		if (ok) {
			box(x, cx - side / 2, cy - side / 2, side, side,
			    0x9aa0a6u);
		} else {
			x->c->ops->line(x->c, cx - side / 3, cy - side / 3,
					cx + side / 3, cy + side / 3, ALERT,
					1.5);
			x->c->ops->line(x->c, cx - side / 3, cy + side / 3,
					cx + side / 3, cy - side / 3, ALERT,
					1.5);
		}
	}
	length_bar(x, px, py);
	colorbar(x, px + BAR_X, py + MAP_Y + 14, MAP_S - 28, WT_CMAP_VIRIDIS, 0,
		 top, "counts");
	text(x, px + 12, py + CAPTION_1, LEFT, 1, INK,
	     "frame %llu: %dx%d of %dx%d px (bin %d)",
	     (unsigned long long)in->image_frame, w, h, in->sensor_w,
	     in->sensor_h, in->image_bin);
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "grid: subapertures; x: under min_flux (%g)", x->s->min_flux);
}

/* Latency histogram (log axis) and the daemon's counters. */
static void panel_latency(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	const wt_draw_status *st = &in->status;
	double gx = px + 40, gw = PANEL_W - 56, gy = py + 50, gh = 130;
	int lo = WT_DRAW_LAT_BINS, hi = -1;
	uint32_t big = 0;
	char a[32], b[32], c[32];

	panel(x, px, py, "Latency and counters");
	for (int k = 0; k < WT_DRAW_LAT_BINS; k++) {
		if (in->lat_counts[k]) {
			lo = k < lo ? k : lo;
			hi = k;
			big = in->lat_counts[k] > big ? in->lat_counts[k] : big;
		}
	}
	x->c->ops->line(x->c, gx, gy + gh, gx + gw, gy + gh, GREY, 1);
	x->c->ops->line(x->c, gx, gy, gx, gy + gh, GREY, 1);
	if (hi < 0) {
		text(x, gx + gw / 2, gy + gh / 2, MIDDLE, 1, GREY,
		     "no frame records yet");
	} else {
		/* Whole decades around the bins used. */
		int d0 = lo / 10, d1 = hi / 10 + 1;
		int nb = 10 * (d1 - d0);

		for (int k = 10 * d0; k < 10 * d1; k++) {
			double bh = (double)in->lat_counts[k] / big * gh;
			double bx = gx + (double)(k - 10 * d0) / nb * gw;

			if (bh > 0) {
				x->c->ops->rect(x->c, bx + 0.5, gy + gh - bh,
						gw / nb - 1, bh, ACCENT);
			}
		}
		for (int d = d0; d <= d1; d++) {
			double lx = gx + (double)(d - d0) / (d1 - d0) * gw;
			static const char *const units[] = {
				"1 us",	 "10 us",  "100 us", "1 ms",
				"10 ms", "100 ms", "1 s"};

			x->c->ops->line(x->c, lx, gy + gh, lx, gy + gh + 4,
					GREY, 1);
			text(x, lx, gy + gh + 15, MIDDLE, 1, INK, "%s",
			     units[d]);
		}
		text(x, gx - 4, gy + 8, RIGHT, 1, INK, "%u", big);
		text(x, gx - 4, gy + gh, RIGHT, 1, INK, "0");
	}
	text(x, gx + 4, gy - 6, LEFT, 1, INK,
	     "receive -> send, last %d frame records", in->lat_n);
	text(x, px + 12, py + 216, LEFT, 1, INK,
	     "median %s us   99%% %s us   max %s us",
	     num(a, sizeof(a), in->lat_median_us, 3),
	     num(b, sizeof(b), in->lat_p99_us, 3),
	     num(c, sizeof(c), in->lat_max_us, 3));
	{
		static const char *const names[] = {
			"received",	  "dropped",  "stale",
			"refused",	  "bad size", "wrong kind",
			"rejected",	  "not sent", "telemetry lost",
			"clipped frames", "faults",
		};
		long long v[] = {
			st->received,
			st->dropped,
			st->stale,
			st->refused,
			st->bad_dimensions,
			st->wrong_kind,
			st->rejected,
			st->send_failed,
			st->telemetry_dropped,
			st->clipped_frames,
			st->faults,
		};

		for (size_t k = 0; k < sizeof(v) / sizeof(v[0]); k++) {
			double tx = px + 12 + (k % 2) * (PANEL_W / 2.0);
			double ty = py + 240 + 14 * (double)(k / 2);

			text(x, tx, ty, LEFT, 1,
			     k > 0 && v[k] > 0 && k != 9 ? ALERT : INK,
			     "%-15s %s", names[k],
			     st->known ? num(a, sizeof(a), (double)v[k], 6)
				       : "n/a");
		}
	}
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "counts since the daemon started (status)");
}

/* Colours of the flag kinds: distinct from the grey of unflagged ones. */
static const uint32_t flag_colours[WT_DRAW_FLAG_KINDS] = {
	ALERT, 0xe08a00u, 0x7d3c98u, 0x1f77b4u, 0x2e8b57u, 0x8c564bu,
};

/* The actuator layout with the calibration's per-actuator flags. */
static void panel_actuators(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	const wt_grid *g = in->actuators;
	double half = MAP_S / 2.0, rpx, ox = px + MAP_X + half;
	double oy = py + MAP_Y + half;
	int flagged = 0;

	panel(x, px, py, "Actuator flags");
	rpx = half / fmax(1, g->n * g->pitch / 2);
	x->c->ops->ring(x->c, ox, oy, rpx, GREY, 1);
	for (int k = 0; k < g->n_valid; k++) {
		double cx = ox + g->x[k] * rpx, cy = oy + g->y[k] * rpx;
		double r = 0.42 * g->pitch * rpx;
		uint32_t col = PALE;

		for (int f = 0; f < in->n_flag_kinds; f++) {
			if (in->act_flags[k] & (1u << f)) {
				col = flag_colours[f];
				break;
			}
		}
		flagged += col != PALE;
		x->c->ops->disc(x->c, cx, cy, r, col);
	}
	if (!in->have_flags) {
		no_data(x, px, py, "no calibration report seen");
	}
	for (int f = 0; f < in->n_flag_kinds; f++) {
		double ly = py + MAP_Y + 20 + 18 * f;

		x->c->ops->disc(x->c, px + BAR_X + 6, ly - 3, 5,
				flag_colours[f]);
		text(x, px + BAR_X + 16, ly, LEFT, 1, INK, "%.9s %d",
		     in->flag_names[f], in->flag_counts[f]);
	}
	text(x, px + 12, py + CAPTION_1, LEFT, 1, INK,
	     in->have_flags ? "%d of %d actuators flagged"
			    : "flags come with the calibration event",
	     flagged, g->n_valid);
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "of the calibration report (e.g. weak: under 1/4 median)");
}

/* Value of one field of history point k. */
static double hist_value(const wt_draw_info *in, int k, size_t field)
{
	double v;

	memcpy(&v, (const char *)&in->hist[k] + field, sizeof(v));
	return v;
}

/* One history series as a broken line (gaps at NaN). */
static void series(struct ctx *x, double px, double py, double w, double h,
		   double t0, double t1, double top, size_t field, uint32_t col)
{
	const wt_draw_info *in = x->in;
	double lx = 0, ly = 0;
	bool pen = false;

	for (int k = 0; k < in->n_hist; k++) {
		double v = hist_value(in, k, field), sx, sy;

		if (!isfinite(v)) {
			pen = false;
			continue;
		}
		sx = px + (in->hist[k].t_s - t0) / (t1 - t0) * w;
		sy = py + h - fmin(fmax(v / top, 0), 1) * h;
		if (pen) {
			x->c->ops->line(x->c, lx, ly, sx, sy, col, 1.5);
		} else if (k + 1 == in->n_hist ||
			   !isfinite(hist_value(in, k + 1, field))) {
			/* A point with no neighbour: a dot. */
			x->c->ops->disc(x->c, sx, sy, 1.5, col);
		}
		lx = sx;
		ly = sy;
		pen = true;
	}
}

static void axes(struct ctx *x, double px, double py, double w, double h,
		 double top, const char *label)
{
	char a[32], b[32];

	for (int k = 0; k <= 2; k++) {
		x->c->ops->line(x->c, px, py + h * k / 2, px + w,
				py + h * k / 2, k == 2 ? GREY : PALE, 1);
	}
	x->c->ops->line(x->c, px, py, px, py + h, GREY, 1);
	text(x, px - 4, py + 4, RIGHT, 1, INK, "%s", num(a, sizeof(a), top, 3));
	text(x, px - 4, py + h / 2 + 4, RIGHT, 1, INK, "%s",
	     num(b, sizeof(b), top / 2, 3));
	text(x, px - 4, py + h + 4, RIGHT, 1, INK, "0");
	text(x, px + 4, py - 4, LEFT, 1, INK, "%s", label);
}

static void panel_history(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	double t0, t1, top = 0, gx = px + 52, gw = PANEL_W - 70, h = 110;

	panel(x, px, py, "History");
	if (in->n_hist == 0) {
		no_data(x, px, py, "no history yet");
		return;
	}
	t1 = in->hist[in->n_hist - 1].t_s;
	t0 = in->hist[0].t_s;
	if (t1 - t0 < 1e-9) {
		t0 = t1 - 1;
	}
	for (int k = 0; k < in->n_hist; k++) {
		if (isfinite(in->hist[k].rms_nm)) {
			top = fmax(top, in->hist[k].rms_nm);
		}
		if (isfinite(in->hist[k].truth_rms_nm)) {
			top = fmax(top, in->hist[k].truth_rms_nm);
		}
	}
	top = nice_ceil(top > 0 ? top : 1);
	axes(x, gx, py + 58, gw, h, top, "residual RMS, nm");
	series(x, gx, py + 58, gw, h, t0, t1, top,
	       offsetof(wt_draw_point, truth_rms_nm), TRUTH);
	series(x, gx, py + 58, gw, h, t0, t1, top,
	       offsetof(wt_draw_point, rms_nm), ACCENT);
	axes(x, gx, py + 200, gw, h, 1, "Strehl ratio");
	series(x, gx, py + 200, gw, h, t0, t1, 1,
	       offsetof(wt_draw_point, truth_strehl), TRUTH);
	series(x, gx, py + 200, gw, h, t0, t1, 1,
	       offsetof(wt_draw_point, strehl), ACCENT);
	text(x, gx, py + 324, MIDDLE, 1, INK, "%.3g s", t0 - t1);
	text(x, gx + gw, py + 324, MIDDLE, 1, INK, "now");
	x->c->ops->line(x->c, px + 12, py + CAPTION_1 - 3, px + 30,
			py + CAPTION_1 - 3, ACCENT, 2);
	text(x, px + 34, py + CAPTION_1, LEFT, 1, INK,
	     "estimate from the slopes (Marechal)");
	x->c->ops->line(x->c, px + 12, py + CAPTION_2 - 3, px + 30,
			py + CAPTION_2 - 3, TRUTH, 2);
	text(x, px + 34, py + CAPTION_2, LEFT, 1, INK,
	     "simulator truth (when it runs)");
}

static void panel_sv(struct ctx *x, double px, double py)
{
	const wt_draw_info *in = x->in;
	const wt_draw_status *st = &in->status;
	double lo = INFINITY, hi = -INFINITY, gx = px + 52, gw = PANEL_W - 70;
	double gy = py + 58, gh = 250;
	int n = in->n_sv;

	panel(x, px, py, "Singular values");
	for (int k = 0; k < n; k++) {
		if (in->sv[k] > 0 && isfinite(in->sv[k])) {
			lo = fmin(lo, log10(in->sv[k]));
			hi = fmax(hi, log10(in->sv[k]));
		}
	}
	if (n == 0 || lo > hi) {
		no_data(x, px, py, "no calibration");
		return;
	}
	lo = floor(lo);
	hi = ceil(hi);
	if (hi - lo < 1) {
		hi = lo + 1;
	}
	for (double d = lo; d <= hi + 1e-9; d += 1) {
		double yy = gy + gh - (d - lo) / (hi - lo) * gh;

		x->c->ops->line(x->c, gx, yy, gx + gw, yy, PALE, 1);
		text(x, gx - 4, yy + 4, RIGHT, 1, INK, "1e%d", (int)d);
	}
	x->c->ops->line(x->c, gx, gy, gx, gy + gh, GREY, 1);
	x->c->ops->line(x->c, gx, gy + gh, gx + gw, gy + gh, GREY, 1);
	for (int mark = 0; mark < 2; mark++) {
		int m = mark == 0 ? st->modes : st->recommended;
		double xx = gx + (m - 0.5) / n * gw;
		bool left = xx > gx + 0.6 * gw;
		uint32_t col = mark == 0 ? INK : TRUTH;

		if (m <= 0 || m > n) {
			continue;
		}
		x->c->ops->line(x->c, xx, gy, xx, gy + gh, col, 1);
		text(x, xx + (left ? -3 : 3), gy + 10 + 12 * mark,
		     left ? RIGHT : LEFT, 1, col,
		     mark == 0 ? "kept %d" : "recommended %d", m);
	}
	for (int k = 0; k < n; k++) {
		if (!(in->sv[k] > 0) || !isfinite(in->sv[k])) {
			continue;
		}
		x->c->ops->disc(
			x->c, gx + (k + 0.5) / n * gw,
			gy + gh - (log10(in->sv[k]) - lo) / (hi - lo) * gh, 1.8,
			ACCENT);
	}
	text(x, gx, py + gh + 72, MIDDLE, 1, INK, "1");
	text(x, gx + gw, py + gh + 72, MIDDLE, 1, INK, "%d", n);
	text(x, px + 12, py + CAPTION_1, LEFT, 1, INK,
	     "mode index; condition number %.4g", st->condition);
	text(x, px + 12, py + CAPTION_2, LEFT, 1, GREY,
	     "of the interaction matrix (calibration)");
}

static uint32_t state_colour(const char *state)
{
	if (strcmp(state, "closed") == 0) {
		return 0x2e8b57u;
	}
	if (strcmp(state, "held") == 0) {
		return 0xb8860bu;
	}
	if (strcmp(state, "calibrating") == 0) {
		return 0x7d3c98u;
	}
	if (strcmp(state, "fault") == 0) {
		return ALERT;
	}
	return 0x666666u;
}

static void header(struct ctx *x, const char *title)
{
	const wt_draw_info *in = x->in;
	const wt_draw_status *st = &in->status;
	const char *state = st->known	     ? st->state
			    : in->have_frame ? wt_state_name(in->state)
					     : "unknown";
	char up[16], a[32], b[32], c[32], g[32], l[32];
	size_t k;

	for (k = 0; state[k] && k + 1 < sizeof(up); k++) {
		up[k] = (char)toupper((unsigned char)state[k]);
	}
	up[k] = '\0';
	x->c->ops->rect(x->c, 0, 0, PIC_W, HEADER_H, 0x2b2f36u);
	x->c->ops->text(x->c, 12, 26, LEFT, 2, PAPER, "wavetrim");
	x->c->ops->rect(x->c, 128, 8, text_width(up, 2) + 16, 24,
			state_colour(state));
	x->c->ops->text(x->c, 136, 27, LEFT, 2, PAPER, up);
	if (st->fault[0]) {
		text(x, 152 + text_width(up, 2), 26, LEFT, 1, 0xffb0a0u,
		     "fault: %s", st->fault);
	}
	if (title) {
		text(x, PIC_W - 12, 26, RIGHT, 1, 0xc8ccd2u, "%s", title);
	}
	text(x, 12, 47, LEFT, 1, PAPER,
	     "frame %llu  %s Hz  latency %s us (max %s)  dropped %lld  "
	     "refused %lld  stale %lld  gain %s  leak %s  modes %d",
	     (unsigned long long)in->frame_id,
	     num(a, sizeof(a), st->frame_rate_hz, 4),
	     num(b, sizeof(b),
		 st->known ? st->latency_median_us : in->latency_us, 3),
	     num(c, sizeof(c), st->latency_max_us, 3), st->dropped, st->refused,
	     st->stale, num(g, sizeof(g), st->gain, 3),
	     num(l, sizeof(l), st->leak, 3), st->modes);
}

static void draw_all(struct cv *c, const wt_draw_scene *s, const char *title)
{
	struct ctx x = {.c = c, .s = s, .in = &s->info};
	double top = HEADER_H + GAP;

	wt_draw_cmap_table(WT_CMAP_VIRIDIS, x.maps[WT_CMAP_VIRIDIS]);
	wt_draw_cmap_table(WT_CMAP_COOLWARM, x.maps[WT_CMAP_COOLWARM]);
	c->ops->rect(c, 0, 0, PIC_W, PIC_H, 0xeceff1u);
	header(&x, title);
	for (int k = 0; k < 8; k++) {
		static void (*const draw[8])(struct ctx *, double, double) = {
			panel_image,   panel_slopes,	panel_wavefront,
			panel_command, panel_history,	panel_latency,
			panel_sv,      panel_actuators,
		};
		static const char *const ids[8] = {WT_DRAW_PANEL_IDS};

		c->ops->group(c, ids[k]);
		draw[k](&x, GAP + (k % 4) * (GAP + PANEL_W),
			top + (k / 4) * (PANEL_H + GAP));
		c->ops->group_end(c);
	}
}

int wt_draw_scene_render(const wt_draw_scene *s, enum wt_draw_format format,
			 const char *title, uint8_t **out, size_t *len,
			 wt_error *err)
{
	*out = NULL;
	*len = 0;
	if (format == WT_DRAW_PNG) {
		struct raster r = {
			.base = {.ops = &raster_ops,
				 .width = PIC_W,
				 .height = PIC_H,
				 .err = err},
		};
		int rc;

		r.rgb = calloc((size_t)PIC_W * PIC_H, 3);
		if (!r.rgb) {
			return wt_error_set(err, -ENOMEM,
					    "draw: out of memory");
		}
		draw_all(&r.base, s, title);
		rc = wt_draw_png_encode(r.rgb, PIC_W, PIC_H, 3, out, len, err);
		free(r.rgb);
		return rc;
	} else {
		struct svg v = {
			.base = {.ops = &svg_ops,
				 .width = PIC_W,
				 .height = PIC_H,
				 .err = err},
		};

		sb_printf(&v.sb,
			  "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"
			  "<svg xmlns=\"http://www.w3.org/2000/svg\" "
			  "width=\"%d\" height=\"%d\" viewBox=\"0 0 %d %d\" "
			  "font-family=\"DejaVu Sans Mono, monospace\">\n",
			  PIC_W, PIC_H, PIC_W, PIC_H);
		draw_all(&v.base, s, title);
		sb_printf(&v.sb, "</svg>\n");
		if (v.sb.failed) {
			free(v.sb.buf);
			return wt_error_set(err, -ENOMEM,
					    "draw: out of memory");
		}
		*out = (uint8_t *)v.sb.buf;
		*len = v.sb.len;
		return 0;
	}
}

static bool ends_with(const char *s, const char *suffix)
{
	size_t n = strlen(s), m = strlen(suffix);

	return n >= m && strcasecmp(s + n - m, suffix) == 0;
}

int wt_draw_scene_save(const wt_draw_scene *s, const char *path,
		       const char *title, wt_error *err)
{
	enum wt_draw_format f;
	uint8_t *buf;
	size_t len;
	int rc;

	if (ends_with(path, ".png")) {
		f = WT_DRAW_PNG;
	} else if (ends_with(path, ".svg")) {
		f = WT_DRAW_SVG;
	} else {
		return wt_error_set(err, -EINVAL,
				    "%s: the name must end in .png or .svg",
				    path);
	}
	rc = wt_draw_scene_render(s, f, title, &buf, &len, err);
	if (rc < 0) {
		return rc;
	}
	rc = write_file(path, buf, len, err);
	free(buf);
	return rc;
}

int wt_draw_record_size(const wt_config *cfg, size_t *bytes, wt_error *err)
{
	wt_draw_scene *s;
	int rc = wt_draw_scene_create(cfg, &s, err);

	if (rc < 0) {
		return rc;
	}
	*bytes = wt_frame_record_bytes((size_t)s->n_sub, (size_t)s->n_act);
	wt_draw_scene_destroy(s);
	return 0;
}

int wt_draw_snapshot(const wt_config *cfg, const char *status_json,
		     const void *records, size_t records_len, const char *path,
		     wt_error *err)
{
	return wt_draw_snapshot_image(cfg, status_json, records, records_len,
				      NULL, 0, path, err);
}

int wt_draw_snapshot_image(const wt_config *cfg, const char *status_json,
			   const void *records, size_t records_len,
			   const void *image, size_t image_len,
			   const char *path, wt_error *err)
{
	wt_draw_scene *s;
	const uint8_t *p = records;
	size_t rec;
	int rc;

	rc = wt_draw_scene_create(cfg, &s, err);
	if (rc < 0) {
		return rc;
	}
	rec = wt_frame_record_bytes((size_t)s->n_sub, (size_t)s->n_act);
	if (records_len % rec != 0) {
		rc = wt_error_set(err, -EINVAL,
				  "snapshot: %zu bytes of frame records is "
				  "not a multiple of %zu",
				  records_len, rec);
		goto out;
	}
	if (status_json) {
		rc = wt_draw_scene_status(s, status_json, strlen(status_json),
					  err);
		if (rc < 0) {
			goto out;
		}
	}
	for (size_t off = 0; off < records_len; off += rec) {
		uint64_t ns;

		rc = wt_draw_scene_frame(s, p + off, rec, err);
		if (rc < 0) {
			goto out;
		}
		wt_draw_scene_timing(s, p + off, rec);
		memcpy(&ns, p + off + offsetof(wt_frame_record, recv_ns),
		       sizeof(ns));
		wt_draw_scene_sample(s, (double)ns / 1e9);
	}
	if (image) {
		rc = wt_draw_scene_image(s, image, image_len, err);
		if (rc < 0) {
			goto out;
		}
	}
	rc = wt_draw_scene_save(s, path, path, err);
out:
	wt_draw_scene_destroy(s);
	return rc;
}

/* --- charts (x-y plots of data series) ------------------------------------ */

#define CHART_W 480
#define CHART_H 360

static double chart_v(double v, bool log_scale)
{
	return log_scale ? (v > 0 ? log10(v) : NAN) : v;
}

/* Range of the finite (and, on a log axis, positive) values. */
static void chart_range(const wt_draw_chart *ch, bool y, double *lo,
			double *hi)
{
	bool lg = y ? ch->log_y : ch->log_x;

	*lo = INFINITY;
	*hi = -INFINITY;
	for (int s = 0; s < ch->n_series; s++) {
		const wt_draw_series *se = &ch->series[s];

		for (int k = 0; k < se->n; k++) {
			double v = chart_v(y ? se->y[k] : se->x[k], lg);

			if (isfinite(v)) {
				*lo = fmin(*lo, v);
				*hi = fmax(*hi, v);
			}
		}
	}
	if (!(*lo <= *hi)) {
		*lo = 0;
		*hi = 1;
	}
	if (lg) {
		*lo = floor(*lo);
		*hi = ceil(*hi);
	} else if (y) {
		*lo = fmin(*lo, 0);
		*hi = nice_ceil(*hi > 0 ? *hi : 1);
	}
	if (*hi - *lo <= 0) {
		*hi = *lo + 1;
	}
}

static void chart_tick(struct ctx *x, double v, bool lg, char *buf,
		       size_t len)
{
	(void)x;
	if (lg) {
		snprintf(buf, len, "1e%d", (int)lround(v));
	} else {
		num(buf, len, v, 3);
	}
}

static void draw_chart(struct ctx *x, const wt_draw_chart *ch, double px,
		       double py)
{
	static const uint32_t cols[] = {ACCENT, TRUTH, ALERT, 0x2e7d32u};
	double gx = px + 64, gy = py + 40, gw = CHART_W - 84, gh = CHART_H - 100;
	double x0, x1, y0, y1;
	char a[32];

	panel(x, px, py, ch->title ? ch->title : "");
	chart_range(ch, false, &x0, &x1);
	chart_range(ch, true, &y0, &y1);
	for (int k = 0; k <= 4; k++) {
		double yy = gy + gh - gh * k / 4, xx = gx + gw * k / 4;

		x->c->ops->line(x->c, gx, yy, gx + gw, yy, PALE, 1);
		chart_tick(x, y0 + (y1 - y0) * k / 4, ch->log_y, a, sizeof(a));
		text(x, gx - 4, yy + 4, RIGHT, 1, INK, "%s", a);
		chart_tick(x, x0 + (x1 - x0) * k / 4, ch->log_x, a, sizeof(a));
		text(x, xx, gy + gh + 14, MIDDLE, 1, INK, "%s", a);
	}
	x->c->ops->line(x->c, gx, gy, gx, gy + gh, GREY, 1);
	x->c->ops->line(x->c, gx, gy + gh, gx + gw, gy + gh, GREY, 1);
	text(x, gx + gw / 2, gy + gh + 30, MIDDLE, 1, INK, "%s",
	     ch->xlabel ? ch->xlabel : "");
	text(x, gx, gy - 6, LEFT, 1, INK, "%s", ch->ylabel ? ch->ylabel : "");
	for (int s = 0; s < ch->n_series; s++) {
		const wt_draw_series *se = &ch->series[s];
		uint32_t col = cols[s % 4];
		double lx = 0, ly = 0;
		bool pen = false;

		for (int k = 0; k < se->n; k++) {
			double vx = chart_v(se->x[k], ch->log_x);
			double vy = chart_v(se->y[k], ch->log_y), sx, sy;

			if (!isfinite(vx) || !isfinite(vy)) {
				pen = false;
				continue;
			}
			sx = gx + (vx - x0) / (x1 - x0) * gw;
			sy = gy + gh - fmin(fmax((vy - y0) / (y1 - y0), 0), 1) *
					       gh;
			if (pen) {
				x->c->ops->line(x->c, lx, ly, sx, sy, col, 1.5);
			}
			if (se->n <= 64) {
				x->c->ops->disc(x->c, sx, sy, 2.5, col);
			}
			lx = sx;
			ly = sy;
			pen = true;
		}
		x->c->ops->line(x->c, px + 12, py + CHART_H - 12 - 13 * s - 3,
				px + 30, py + CHART_H - 12 - 13 * s - 3, col,
				2);
		text(x, px + 34, py + CHART_H - 12 - 13 * s, LEFT, 1, INK,
		     "%s", se->label ? se->label : "");
	}
}

int wt_draw_charts_svg(const wt_draw_chart *charts, int n, uint8_t **out,
		       size_t *len, wt_error *err)
{
	int w = GAP + n * (CHART_W + GAP), h = CHART_H + 2 * GAP;
	struct svg v = {
		.base = {.ops = &svg_ops, .width = w, .height = h, .err = err},
	};
	struct ctx x = {.c = &v.base};

	*out = NULL;
	*len = 0;
	if (!charts || n < 1) {
		return wt_error_set(err, -EINVAL, "draw: no chart");
	}
	sb_printf(&v.sb,
		  "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n"
		  "<svg xmlns=\"http://www.w3.org/2000/svg\" "
		  "width=\"%d\" height=\"%d\" viewBox=\"0 0 %d %d\" "
		  "font-family=\"DejaVu Sans Mono, monospace\">\n",
		  w, h, w, h);
	v.base.ops->rect(&v.base, 0, 0, w, h, 0xeceff1u);
	for (int k = 0; k < n; k++) {
		draw_chart(&x, &charts[k], GAP + k * (CHART_W + GAP), GAP);
	}
	sb_printf(&v.sb, "</svg>\n");
	if (v.sb.failed) {
		free(v.sb.buf);
		return wt_error_set(err, -ENOMEM, "draw: out of memory");
	}
	*out = (uint8_t *)v.sb.buf;
	*len = v.sb.len;
	return 0;
}
