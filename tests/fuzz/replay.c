/*
 * replay.c - run a fuzz target over files without libFuzzer.
 *
 * Linked with a target's LLVMFuzzerTestOneInput() in the ordinary (gcc)
 * build, it feeds every file named on the command line, and every file of
 * every folder named there, to the target once.  ctest runs each target's
 * seed corpus this way, so an input that once crashed (and was added to the
 * corpus) keeps being checked by every build, sanitized or not.
 */
#include <dirent.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);
int LLVMFuzzerInitialize(int *argc, char ***argv) __attribute__((weak));

/* Feed one file; returns 0, or -1 when it cannot be read. */
static int run_file(const char *path)
{
	struct stat st;
	uint8_t *data;
	size_t got;
	FILE *f;

	f = fopen(path, "rb");
	if (!f || fstat(fileno(f), &st) != 0) {
		perror(path);
		if (f) {
			fclose(f);
		}
		return -1;
	}
	/* an exact-size heap copy, as libFuzzer gives, so overreads show */
	data = malloc(st.st_size > 0 ? (size_t)st.st_size : 1);
	if (!data) {
		fclose(f);
		return -1;
	}
	got = fread(data, 1, (size_t)st.st_size, f);
	fclose(f);
	if (got != (size_t)st.st_size) {
		fprintf(stderr, "%s: short read\n", path);
		free(data);
		return -1;
	}
	LLVMFuzzerTestOneInput(data, got);
	free(data);
	return 0;
}

static int cmp_names(const void *a, const void *b)
{
	return strcmp(*(char *const *)a, *(char *const *)b);
}

/* Every regular file of a folder, in name order; returns files run or -1. */
static int run_dir(const char *dir)
{
	char **names = NULL, path[4096];
	size_t n = 0, cap = 0, i;
	struct dirent *e;
	struct stat st;
	DIR *d = opendir(dir);
	int ran = 0;

	if (!d) {
		perror(dir);
		return -1;
	}
	while ((e = readdir(d)) != NULL) {
		if (e->d_name[0] == '.') {
			continue;
		}
		if (n == cap) {
			char **more;

			cap = cap ? 2 * cap : 64;
			more = realloc(names, cap * sizeof(*names));
			if (!more) {
				abort();
			}
			names = more;
		}
		names[n] = strdup(e->d_name);
		if (!names[n]) {
			abort();
		}
		n++;
	}
	closedir(d);
	if (n > 0) {
		qsort(names, n, sizeof(*names), cmp_names);
	}
	for (i = 0; i < n; i++) {
		snprintf(path, sizeof(path), "%s/%s", dir, names[i]);
		if (stat(path, &st) == 0 && S_ISREG(st.st_mode)) {
			if (run_file(path) != 0) {
				ran = -1;
			} else if (ran >= 0) {
				ran++;
			}
		}
		free(names[i]);
	}
	free(names);
	return ran;
}

int main(int argc, char **argv)
{
	struct stat st;
	int total = 0, rc;

	if (argc < 2) {
		fprintf(stderr, "usage: %s FILE|FOLDER...\n", argv[0]);
		return 2;
	}
	if (LLVMFuzzerInitialize) {
		LLVMFuzzerInitialize(&argc, &argv);
	}
	for (int i = 1; i < argc; i++) {
		if (stat(argv[i], &st) != 0) {
			perror(argv[i]);
			return 1;
		}
		rc = S_ISDIR(st.st_mode) ? run_dir(argv[i])
					 : (run_file(argv[i]) == 0 ? 1 : -1);
		if (rc < 0) {
			return 1;
		}
		total += rc;
	}
	printf("%s: %d inputs passed\n", argv[0], total);
	return total > 0 ? 0 : 1;
}
