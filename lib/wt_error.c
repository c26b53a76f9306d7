/* wt_error.c - error codes and messages. */
#include "wt_error.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

int wt_error_set(wt_error *err, int code, const char *fmt, ...)
{
	va_list ap;

	if (err) {
		err->code = code;
		va_start(ap, fmt);
		vsnprintf(err->msg, sizeof(err->msg), fmt, ap);
		va_end(ap);
	}
	return code;
}

void wt_error_clear(wt_error *err)
{
	if (err) {
		err->code = 0;
		err->msg[0] = '\0';
	}
}

static const char *const wt_code_text[] = {
	[WT_ECONFIG - WT_ECONFIG] = "configuration refused",
	[WT_EPROTO_SHORT - WT_ECONFIG] = "message shorter than its header",
	[WT_EPROTO_MAGIC - WT_ECONFIG] = "wrong magic bytes",
	[WT_EPROTO_VERSION - WT_ECONFIG] = "unknown protocol version",
	[WT_EPROTO_KIND - WT_ECONFIG] = "unknown message kind",
	[WT_EPROTO_DIMS - WT_ECONFIG] = "bad dimensions for the message kind",
	[WT_EPROTO_PAYLOAD - WT_ECONFIG] = "payload size does not match dimensions",
	[WT_EPROTO_LENGTH - WT_ECONFIG] = "message length does not match header",
	[WT_ENUMERIC - WT_ECONFIG] = "numerical method failed",
	[WT_EMISMATCH - WT_ECONFIG] = "dimensions do not match the configuration",
};

const char *wt_strerror(int code)
{
	int c = code < 0 ? -code : code;

	if (c == 0) {
		return "success";
	}
	if (c >= WT_ECONFIG && c < WT_ECODE_END) {
		return wt_code_text[c - WT_ECONFIG];
	}
	return strerror(c);
}
