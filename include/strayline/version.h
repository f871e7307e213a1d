/*
 * strayline: the version of the library and tool, from meson's project
 * version, for `--version` and for the provenance written into every report
 * and model file.
 */
#ifndef STRAYLINE_VERSION_H
#define STRAYLINE_VERSION_H

#ifdef __cplusplus
extern "C" {
#endif

const char *sl_version(void);

#ifdef __cplusplus
}
#endif

#endif
