/* The program's own internals (coach/main.c and coach/app_*.c): options and
 * the subcommands.  These files, unlike the coach library, do I/O. */
#ifndef VFCOACH_APP_H
#define VFCOACH_APP_H

#include <stddef.h>
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
    /* added for the window and snapshots (h5): */
    int snap_jpeg;           /* --jpeg: snapshots as JPEG instead of PNG        */
    const char *show;        /* --show LIST: what the window shows at start (ovl_opts.show) */
    const char *screenshot;  /* --screenshot FILE (hidden): save the window after --frames N (else 30), quit */
} app_opts;

/* Parses "WxH" within COACH_MIN_DIM..COACH_MAX_DIM; 0 or -EINVAL. */
int app_parse_size(const char *s, int *w, int *h);

/* Subcommands: argv[0] is the subcommand name. Return the exit status. */
int app_analyze_main(int argc, char **argv);
int app_bench_main(int argc, char **argv);
/* vfcoach inspect: composition internals of stills (coach/app_inspect.c). */
int app_inspect_main(int argc, char **argv);

/* ---- cameras (coach/app_list.c) ----------------------------------------
 * --list: prints every camera with its node, bus, stable links, formats,
 * sizes and rates to out; with none, says so and points to the demo scene.
 * Returns the exit status (0, or 1 when udev cannot be read). */
int app_list_cameras(FILE *out);

/* ---- snapshots and the on-ready command (coach/app_snap.c) -------------
 * Main thread only.  Nothing here blocks on a child process. */

/* The default snapshot folder: XDG_PICTURES_DIR from
 * $XDG_CONFIG_HOME/user-dirs.dirs (else ~/.config/user-dirs.dirs), else
 * ~/Pictures; then "/vfcoach".  0, or -ENOENT when there is no home. */
int app_snap_default_dir(char *buf, size_t n);

/* Saves the full-resolution frame as PNG (jpeg = 0) or JPEG (jpeg = 1) and
 * a JSON sidecar (same name, .json) with every measurement (coach_json),
 * the profile, the source and the local time in ISO 8601, into dir
 * (created 0700 when missing: snapshots are private).  Each file is
 * written to a temporary name in dir, synced, then renamed; an existing
 * snapshot is never replaced.  0 and the image path in path, or a negative
 * errno and one line naming the file and the cause in err; on failure no
 * file is left behind. */
int app_snap_save(const char *dir, const coach_frame *f, const coach_result *r, coach_profile profile,
                  const char *source, int jpeg, char *path, size_t pathlen, char *err, size_t errlen);

/* A command run when the frame becomes ready (--on-ready): split into
 * arguments like a POSIX shell would split words ('single', "double" with
 * \ \" \$ \` escapes, backslash outside quotes) but with no expansion and
 * no shell; started with posix_spawnp; one run at a time. */
typedef struct app_hook app_hook;

/* Splits line into at most max-1 arguments (argv[max-1] is not used; the
 * list ends with NULL), copying the words into store.  Returns the count,
 * or -EINVAL (unbalanced quote, trailing backslash, empty) with a line in
 * err, or -E2BIG when argv or store is too small. */
int app_hook_split(const char *line, char **argv, int max, char *store, size_t storelen, char *err,
                   size_t errlen);
/* NULL with a line in err when the command cannot be split. */
app_hook *app_hook_create(const char *line, char *err, size_t errlen);
/* Does not wait for a running child (it is reaped if already done). */
void app_hook_destroy(app_hook *h);
/* Starts the command unless the previous run is still going.  0 started,
 * -EBUSY still running, or a negative errno from posix_spawnp; msg gets
 * one line for the user either way. */
int app_hook_start(app_hook *h, char *msg, size_t n);
/* Reaps without blocking (waitpid WNOHANG).  1 when a run has ended, with
 * its exit status in *status (wait(2) encoding) and a line in msg; 0 when
 * nothing ended. */
int app_hook_poll(app_hook *h, int *status, char *msg, size_t n);
/* Is a run going on? */
int app_hook_running(const app_hook *h);

/* The live loop's snapshot and on-ready duties in one place. */
typedef struct app_shots {
    char dir[4096];          /* snapshot folder ("" when none could be found) */
    int auto_snap;           /* --auto: one snapshot per ready period          */
    int jpeg;
    int pending;             /* a snapshot key was pressed: save the next frame */
    int prev_ready;
    app_hook *hook;          /* --on-ready, or NULL                            */
    const char *source;      /* source name for the sidecar (borrowed)         */
    char msg[1024];          /* the last line for the user                     */
    struct app_saver *saver; /* the thread writing snapshots (app_snap.c)      */
} app_shots;

/* 0, or -EINVAL with a line in err (an --on-ready command that cannot be
 * split).  source is borrowed for the life of s. */
int app_shots_init(app_shots *s, const app_opts *o, const char *source, char *err, size_t errlen);
void app_shots_fini(app_shots *s);
/* Call after each analysed frame while the frame is still held: queues a
 * snapshot (written by a saver thread; its line comes from app_shots_poll)
 * when one was asked for, or when the ready state is entered with --auto;
 * starts --on-ready on entering ready.  Returns how many lines for the
 * user it produced now (the last one in s->msg; earlier ones went to
 * stderr). */
int app_shots_frame(app_shots *s, const coach_frame *f, const coach_result *r, coach_profile p);
/* Call every loop turn: collects a finished snapshot ("Saved ...") or the
 * on-ready command's exit status without blocking.  1 when s->msg has a
 * new line (call again: there may be another). */
int app_shots_poll(app_shots *s);
/* Is a snapshot or the on-ready command still on its way? */
int app_shots_busy(const app_shots *s);

#endif
