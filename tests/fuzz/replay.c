/*
 * Replays a fuzz corpus through a harness without libFuzzer: every file of
 * the folders (or files) given is fed to LLVMFuzzerTestOneInput once, and
 * each is reported as a TAP line. This is how the normal and sanitizer
 * builds keep every saved input (seeds and crash regressions) as a test.
 */
#include <dirent.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static int count;

static int feed(const char *path)
{
    FILE *fp = fopen(path, "rb");
    if (!fp) {
        printf("not ok %d - %s: cannot open\n", ++count, path);
        return 1;
    }
    fseek(fp, 0, SEEK_END);
    long n = ftell(fp);
    fseek(fp, 0, SEEK_SET);
    uint8_t *buf = malloc(n > 0 ? (size_t)n : 1);
    size_t got = buf ? fread(buf, 1, (size_t)(n > 0 ? n : 0), fp) : 0;
    fclose(fp);
    if (!buf) {
        printf("not ok %d - %s: out of memory\n", ++count, path);
        return 1;
    }
    LLVMFuzzerTestOneInput(buf, got);
    free(buf);
    printf("ok %d - %s\n", ++count, path);
    return 0;
}

static int cmp(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

int main(int argc, char **argv)
{
    int bad = 0;
    for (int i = 1; i < argc; i++) {
        struct stat sb;
        if (stat(argv[i], &sb) != 0) {
            printf("not ok %d - %s: missing\n", ++count, argv[i]);
            bad++;
            continue;
        }
        if (!S_ISDIR(sb.st_mode)) {
            bad += feed(argv[i]);
            continue;
        }
        DIR *d = opendir(argv[i]);
        char **names = NULL;
        size_t n = 0, cap = 0;
        for (struct dirent *e; d && (e = readdir(d));) {
            if (e->d_name[0] == '.')
                continue;
            if (n == cap) {
                cap = cap ? cap * 2 : 64;
                names = realloc(names, cap * sizeof *names);
            }
            size_t len = strlen(argv[i]) + strlen(e->d_name) + 2;
            names[n] = malloc(len);
            snprintf(names[n], len, "%s/%s", argv[i], e->d_name);
            n++;
        }
        if (d)
            closedir(d);
        qsort(names, n, sizeof *names, cmp);
        for (size_t k = 0; k < n; k++) {
            struct stat fs;
            if (stat(names[k], &fs) == 0 && S_ISREG(fs.st_mode))
                bad += feed(names[k]);
            free(names[k]);
        }
        free(names);
    }
    printf("1..%d\n", count);
    return bad ? 1 : 0;
}
