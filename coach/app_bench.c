/* PLACEHOLDER until the benchmark lands. Owned by the tone/score work. */
#include <stdio.h>

#include "coach/app.h"

int app_bench_main(int argc, char **argv)
{
    (void)argc; (void)argv;
    fprintf(stderr, "vfcoach bench: not built yet\n");
    return 2;
}
