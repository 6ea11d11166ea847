/* The program's own internals (coach/main.c and coach/app_*.c): options and
 * the subcommands.  These files, unlike the coach library, do I/O. */
#ifndef VFCOACH_APP_H
#define VFCOACH_APP_H

#include <stdint.h>
#include <stdio.h>

#include "coach/coach.h"

typedef struct app_opts {
    const char *source;      /* --source SPEC ("demo", "demo:tabletop", PATH); NULL = first camera else demo */
    const char *device;      /* --device PATH|NAME (a camera)                  */
    int list;                /* --list                                          */
    int w, h;                /* --size WxH (0 = source default)                 */
    double fps;              /* --fps N (0 = default)                           */
    uint64_t seed;           /* --seed N (demo scenes)                          */
    int headless;            /* --headless: JSON lines, no window               */
    long frames;             /* --frames N: stop after N analysed frames (0 = no limit) */
    coach_profile profile;   /* --profile NAME                                  */
    coach_grid grid;         /* --grid thirds|phi                               */
    const char *out_dir;     /* --out DIR (snapshots)                           */
    int auto_snap;           /* --auto                                          */
    const char *on_ready;    /* --on-ready CMD                                  */
    int presenter;           /* --presenter                                     */
    int display;             /* --display N                                     */
    int mirror;              /* --mirror                                        */
    int tone;                /* --tone                                          */
    int stats;               /* --stats: window stats in JSON / on screen       */
} app_opts;

/* Subcommands: argv[0] is the subcommand name. Return the exit status. */
int app_analyze_main(int argc, char **argv);
int app_bench_main(int argc, char **argv);

/* ---- cameras (coach/app_list.c) ----------------------------------------
 * --list: prints every camera with its node, bus, stable links, formats,
 * sizes and rates to out; with none, says so and points to the demo scene.
 * Returns the exit status (0, or 1 when udev cannot be read). */
int app_list_cameras(FILE *out);

#endif
