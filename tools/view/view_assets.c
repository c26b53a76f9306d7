/*
 * view_assets.c - the page's three files, built into the program.
 *
 * The assembler's .incbin copies tools/view/www/{index.html,view.css,
 * view.js} into .rodata at build time (WT_VIEW_WWW is that folder's path,
 * set by tools/view/CMakeLists.txt, which also makes this file depend on
 * the three).  `wavetrim-view --www DIR` serves files from DIR instead, to
 * edit the page without rebuilding.
 */
#include <stddef.h>
#include <string.h>

#include "view.h"

#ifndef WT_VIEW_WWW
#error "WT_VIEW_WWW must name the folder of index.html, view.css, view.js"
#endif

#define EMBED(sym, file)                                                       \
	__asm__(".pushsection .rodata\n"                                       \
		".global " #sym "\n"                                           \
		".hidden " #sym "\n"                                           \
		".global " #sym "_end\n"                                       \
		".hidden " #sym "_end\n" #sym ":\n"                            \
		".incbin \"" WT_VIEW_WWW "/" file "\"\n" #sym "_end:\n"        \
		".byte 0\n"                                                    \
		".popsection\n");                                              \
	extern const char sym[], sym##_end[]

EMBED(wtv_index_html, "index.html");
EMBED(wtv_view_css, "view.css");
EMBED(wtv_view_js, "view.js");

const char *view_asset(const char *name, size_t *len, const char **mime)
{
	static const struct {
		const char *name, *mime, *start, *end;
	} files[] = {
		{"index.html", "text/html; charset=utf-8", wtv_index_html,
		 wtv_index_html_end},
		{"view.css", "text/css; charset=utf-8", wtv_view_css,
		 wtv_view_css_end},
		{"view.js", "text/javascript; charset=utf-8", wtv_view_js,
		 wtv_view_js_end},
	};

	for (size_t k = 0; k < sizeof(files) / sizeof(files[0]); k++) {
		if (strcmp(name, files[k].name) == 0) {
			if (len) {
				*len = (size_t)(files[k].end - files[k].start);
			}
			if (mime) {
				*mime = files[k].mime;
			}
			return files[k].start;
		}
	}
	return NULL;
}
