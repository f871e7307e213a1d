/*
 * The version string, filled in by meson (see the top-level meson.build) so
 * that there is one place where the version is set.
 */
#include "strayline/version.h"

#include "sl_config.h"

const char *sl_version(void)
{
    return SL_VERSION;
}
