/*
 * `strayline model`: placeholder until its stage exists; it says so and fails
 * with an internal error rather than pretending to work.
 */
#include <stdio.h>

#include "cli.h"

int sl_cmd_model(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "strayline model: not implemented yet\n");
    return SL_EXIT_INTERNAL;
}
