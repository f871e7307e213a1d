/*
 * `strayline estimate`: placeholder until its stage exists; it says so and fails
 * with an internal error rather than pretending to work.
 */
#include <stdio.h>

#include "cli.h"

int sl_cmd_estimate(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fprintf(stderr, "strayline estimate: not implemented yet\n");
    return SL_EXIT_INTERNAL;
}
