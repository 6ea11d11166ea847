/* vfcoach — the program: options, subcommands and the run loop.
 *
 * Threads: the capture thread (capture/thread.c) fills a latest-frame
 * mailbox and calls on_capture_event(), which only wakes this thread (an SDL
 * user event in window mode, an eventfd otherwise).  Everything else —
 * analysis, drawing, every SDL call, writing snapshots — happens here on the
 * main thread, always on the newest frame; frames that arrive while one is
 * being analysed replace each other in the mailbox and are counted as drops.
 */
#include <errno.h>
#include <getopt.h>
#include <inttypes.h>
#include <math.h>
#include <poll.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/eventfd.h>
#include <time.h>
#include <unistd.h>

#include <SDL.h>

#include "capture/capture.h"
#include "coach/app.h"
#include "coach/coach.h"
#include "overlay/overlay.h"

#define VFCOACH_VERSION "0.1"

static volatile sig_atomic_t g_stop;

static void on_signal(int sig)
{
    (void)sig;
    g_stop = 1;
}

static double now_s(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* ---- options --------------------------------------------------------- */

static void usage(FILE *f)
{
    fprintf(f,
        "usage: vfcoach [OPTIONS]            coach live from a camera or the demo scene\n"
        "       vfcoach analyze [--profile P] [--grid G] FILE...   JSON for PNG/JPEG stills\n"
        "       vfcoach bench [--size WxH] [--frames N]             analysis speed\n"
        "\n"
        "source:\n"
        "  --source SPEC      demo | demo:harbour | demo:tabletop | IMAGE | FOLDER | camera\n"
        "  --device CAMERA    a camera: /dev/videoN, a /dev/v4l/by-id or by-path link, or its name\n"
        "  --list             list cameras with their formats, sizes and rates\n"
        "  --size WxH         capture size (demo: render size)\n"
        "  --fps N            capture rate\n"
        "  --seed N           demo scenes: random seed (default 1)\n"
        "coaching:\n"
        "  --profile P        landscape | portrait | product (default landscape)\n"
        "  --grid G           thirds | phi: power points for subject placement\n"
        "output:\n"
        "  --headless         no window: one JSON object per analysed frame on stdout\n"
        "  --frames N         stop after N analysed frames\n"
        "  --stats            add window statistics (fps, drops, latency)\n"
        "  --out DIR          snapshot folder (default: Pictures/vfcoach)\n"
        "  --auto             save a snapshot each time the frame becomes ready\n"
        "  --on-ready CMD     run CMD (no shell) each time the frame becomes ready\n"
        "  --presenter        fullscreen, large type, one guide at a time\n"
        "  --display N        display for presenter mode\n"
        "  --mirror           start mirrored\n"
        "  --tone             short tone when the frame becomes ready\n"
        "  --jpeg             snapshots as JPEG (default PNG)\n"
        "  --show LIST        what the window shows at start, e.g. thirds,horizon,histogram\n"
        "                     (thirds phi diagonals spiral[:0-3] centre horizon crop:1:1|4:5|3:2|16:9\n"
        "                      histogram histogram-rgb zebras peaking subject meter hints label\n"
        "                      explain help stats, or none)\n"
        "  --help, --version\n");
}

static int parse_long(const char *s, long lo, long hi, long *out)
{
    char *end;
    errno = 0;
    long v = strtol(s, &end, 10);
    if (errno || end == s || *end || v < lo || v > hi)
        return -EINVAL;
    *out = v;
    return 0;
}

enum {
    OPT_SOURCE = 256, OPT_DEVICE, OPT_LIST, OPT_SIZE, OPT_FPS, OPT_SEED, OPT_HEADLESS,
    OPT_FRAMES, OPT_PROFILE, OPT_GRID, OPT_OUT, OPT_AUTO, OPT_ON_READY, OPT_PRESENTER,
    OPT_DISPLAY, OPT_MIRROR, OPT_TONE, OPT_STATS, OPT_HELP, OPT_VERSION,
    OPT_JPEG, OPT_SHOW, OPT_SCREENSHOT /* h5: window and snapshots */
};

static const struct option long_opts[] = {
    {"source", required_argument, NULL, OPT_SOURCE},
    {"device", required_argument, NULL, OPT_DEVICE},
    {"list", no_argument, NULL, OPT_LIST},
    {"size", required_argument, NULL, OPT_SIZE},
    {"fps", required_argument, NULL, OPT_FPS},
    {"seed", required_argument, NULL, OPT_SEED},
    {"headless", no_argument, NULL, OPT_HEADLESS},
    {"frames", required_argument, NULL, OPT_FRAMES},
    {"profile", required_argument, NULL, OPT_PROFILE},
    {"grid", required_argument, NULL, OPT_GRID},
    {"out", required_argument, NULL, OPT_OUT},
    {"auto", no_argument, NULL, OPT_AUTO},
    {"on-ready", required_argument, NULL, OPT_ON_READY},
    {"presenter", no_argument, NULL, OPT_PRESENTER},
    {"display", required_argument, NULL, OPT_DISPLAY},
    {"mirror", no_argument, NULL, OPT_MIRROR},
    {"tone", no_argument, NULL, OPT_TONE},
    {"stats", no_argument, NULL, OPT_STATS},
    {"jpeg", no_argument, NULL, OPT_JPEG},
    {"show", required_argument, NULL, OPT_SHOW},
    {"screenshot", required_argument, NULL, OPT_SCREENSHOT}, /* hidden: tests/check_screens.sh */
    {"help", no_argument, NULL, OPT_HELP},
    {"version", no_argument, NULL, OPT_VERSION},
    {NULL, 0, NULL, 0},
};

/* Returns 0, 1 when the program should exit successfully (help, version),
 * or -EINVAL after printing one line about the bad option. */
static int parse_opts(int argc, char **argv, app_opts *o)
{
    memset(o, 0, sizeof(*o));
    o->seed = 1;
    o->display = 0;
    o->profile = COACH_PROFILE_LANDSCAPE;
    o->grid = COACH_GRID_THIRDS;
    opterr = 0;
    for (;;) {
        int idx = 0;
        int c = getopt_long(argc, argv, ":", long_opts, &idx);
        if (c == -1)
            break;
        long v;
        switch (c) {
        case OPT_SOURCE: o->source = optarg; break;
        case OPT_DEVICE: o->device = optarg; break;
        case OPT_LIST: o->list = 1; break;
        case OPT_SIZE:
            if (app_parse_size(optarg, &o->w, &o->h)) {
                fprintf(stderr, "vfcoach: --size '%s': expected WIDTHxHEIGHT, e.g. 1280x720\n", optarg);
                return -EINVAL;
            }
            break;
        case OPT_FPS: {
            char *end;
            o->fps = strtod(optarg, &end);
            if (end == optarg || *end || !(o->fps >= 1 && o->fps <= 240)) {
                fprintf(stderr, "vfcoach: --fps '%s': expected a rate from 1 to 240\n", optarg);
                return -EINVAL;
            }
            break;
        }
        case OPT_SEED:
            if (parse_long(optarg, 0, 0x7fffffffL, &v)) {
                fprintf(stderr, "vfcoach: --seed '%s': expected a whole number\n", optarg);
                return -EINVAL;
            }
            o->seed = (uint64_t)v;
            break;
        case OPT_HEADLESS: o->headless = 1; break;
        case OPT_FRAMES:
            if (parse_long(optarg, 1, 100000000L, &v)) {
                fprintf(stderr, "vfcoach: --frames '%s': expected a positive whole number\n", optarg);
                return -EINVAL;
            }
            o->frames = v;
            break;
        case OPT_PROFILE:
            if (coach_profile_parse(optarg, &o->profile)) {
                fprintf(stderr, "vfcoach: --profile '%s': expected landscape, portrait or product\n", optarg);
                return -EINVAL;
            }
            break;
        case OPT_GRID:
            if (!strcmp(optarg, "thirds"))
                o->grid = COACH_GRID_THIRDS;
            else if (!strcmp(optarg, "phi"))
                o->grid = COACH_GRID_PHI;
            else {
                fprintf(stderr, "vfcoach: --grid '%s': expected thirds or phi\n", optarg);
                return -EINVAL;
            }
            break;
        case OPT_OUT: o->out_dir = optarg; break;
        case OPT_AUTO: o->auto_snap = 1; break;
        case OPT_ON_READY:
            if (!*optarg) {
                fprintf(stderr, "vfcoach: --on-ready: the command is empty\n");
                return -EINVAL;
            }
            o->on_ready = optarg;
            break;
        case OPT_PRESENTER: o->presenter = 1; break;
        case OPT_DISPLAY:
            if (parse_long(optarg, 0, 63, &v)) {
                fprintf(stderr, "vfcoach: --display '%s': expected a display number from 0\n", optarg);
                return -EINVAL;
            }
            o->display = (int)v;
            break;
        case OPT_MIRROR: o->mirror = 1; break;
        case OPT_TONE: o->tone = 1; break;
        case OPT_STATS: o->stats = 1; break;
        case OPT_JPEG: o->snap_jpeg = 1; break;
        case OPT_SHOW: o->show = optarg; break;
        case OPT_SCREENSHOT: o->screenshot = optarg; break;
        case OPT_HELP: usage(stdout); return 1;
        case OPT_VERSION: printf("vfcoach %s\n", VFCOACH_VERSION); return 1;
        case ':':
            fprintf(stderr, "vfcoach: option '%s' needs a value (see --help)\n", argv[optind - 1]);
            return -EINVAL;
        default:
            fprintf(stderr, "vfcoach: unknown option '%s' (see --help)\n", argv[optind - 1]);
            return -EINVAL;
        }
    }
    if (optind < argc) {
        fprintf(stderr, "vfcoach: unexpected argument '%s' (see --help)\n", argv[optind]);
        return -EINVAL;
    }
    if (o->source && o->device) {
        fprintf(stderr, "vfcoach: give either --source or --device, not both\n");
        return -EINVAL;
    }
    return 0;
}

/* ---- waking the main thread ---------------------------------------- */

enum { EVB_LOST = 1, EVB_BACK = 2, EVB_END = 4 };

typedef struct app_wake {
    Uint32 sdl_event;   /* registered SDL event type, or 0 without a window */
    int efd;            /* eventfd, without a window                         */
    int events;         /* EVB_* bits set by the capture thread, taken by the main thread */
    int last;           /* the latest cap_event other than CAP_EV_FRAME */
} app_wake;

/* Runs on the capture thread: only wakes the main thread. */
static void on_capture_event(void *ctx, cap_event ev)
{
    app_wake *w = ctx;
    /* Bits, not a value: a loss and a return that both happen before the
     * main thread looks must both be reported. */
    if (ev == CAP_EV_LOST)
        __atomic_fetch_or(&w->events, EVB_LOST, __ATOMIC_RELEASE);
    else if (ev == CAP_EV_BACK)
        __atomic_fetch_or(&w->events, EVB_BACK, __ATOMIC_RELEASE);
    else if (ev == CAP_EV_END)
        __atomic_fetch_or(&w->events, EVB_END, __ATOMIC_RELEASE);
    if (ev != CAP_EV_FRAME)
        __atomic_store_n(&w->last, (int)ev, __ATOMIC_RELEASE);
    if (w->sdl_event) {
        SDL_Event e;
        SDL_zero(e);
        e.type = w->sdl_event;
        e.user.code = (Sint32)ev;
        SDL_PushEvent(&e);
    } else {
        uint64_t one = 1;
        ssize_t r = write(w->efd, &one, sizeof one);
        (void)r; /* a full counter still wakes the reader */
    }
}

/* ---- output helpers ---------------------------------------------------- */

static void json_num(char *buf, size_t n, size_t *len, const char *key, double v)
{
    if (*len >= n)
        return;
    int k = isfinite(v) ? snprintf(buf + *len, n - *len, ",\"%s\":%.6g", key, v)
                        : snprintf(buf + *len, n - *len, ",\"%s\":null", key);
    if (k > 0)
        *len += (size_t)k;
}

/* Prints the analysis of one live frame as a JSON line: coach_json() plus
 * the frame's sequence number, capture time, ground truth and stats. */
static void print_frame_json(const coach_result *r, const cap_frame *f, const cap_stats *st,
                             double latency_ms, int with_stats)
{
    static char buf[16384];
    int k = coach_json(r, NULL, buf, sizeof buf - 1024);
    if (k <= 0 || (size_t)k >= sizeof buf - 1024 || buf[k - 1] != '}')
        return;
    size_t len = (size_t)k - 1; /* drop the closing brace and append */
    int m = snprintf(buf + len, sizeof buf - len, ",\"seq\":%" PRIu64, f->seq);
    len += (size_t)m;
    json_num(buf, sizeof buf, &len, "t_capture", f->t_capture);
    if (f->truth.valid) {
        const cap_truth *t = &f->truth;
        len += (size_t)snprintf(buf + len, sizeof buf - len, ",\"truth\":{");
        size_t start = len;
        json_num(buf, sizeof buf, &len, "horizon_deg", t->horizon_deg);
        json_num(buf, sizeof buf, &len, "horizon_y", t->horizon_y);
        json_num(buf, sizeof buf, &len, "subject_x", t->subject_x);
        json_num(buf, sizeof buf, &len, "subject_y", t->subject_y);
        json_num(buf, sizeof buf, &len, "subject_w", t->subject_w);
        json_num(buf, sizeof buf, &len, "subject_h", t->subject_h);
        json_num(buf, sizeof buf, &len, "exposure_ev", t->exposure_ev);
        json_num(buf, sizeof buf, &len, "blur_sigma", t->blur_sigma);
        buf[start] = ' '; /* the first key's leading comma */
        len += (size_t)snprintf(buf + len, sizeof buf - len, "}");
    }
    if (with_stats) {
        len += (size_t)snprintf(buf + len, sizeof buf - len,
                                ",\"stats\":{\"published\":%" PRIu64 ",\"dropped\":%" PRIu64 "",
                                st->published, st->dropped);
        json_num(buf, sizeof buf, &len, "latency_ms", latency_ms);
        len += (size_t)snprintf(buf + len, sizeof buf - len, "}");
    }
    if (len + 2 < sizeof buf) {
        buf[len++] = '}';
        buf[len++] = '\n';
        fwrite(buf, 1, len, stdout);
        fflush(stdout);
    }
}

static void print_status_line(const coach_result *r, const char *source)
{
    char tilt[32] = "level: -";
    if (r->has_tilt)
        snprintf(tilt, sizeof tilt, "tilt %+.1f°", r->tilt_deg);
    printf("%s | score %3.0f%s | EV %+.1f | clip %.1f%% | %s | %s\n", source, r->score,
           r->ready ? " READY" : "", r->exposure_ev, 100.0 * r->clip_high, tilt,
           r->nhints ? r->hints[0] : "looks good");
    fflush(stdout);
}

/* ---- the live loop ------------------------------------------------------ */

typedef struct app_run {
    app_opts *o;
    cap_source *src;     /* until handed to the thread */
    cap_mailbox *mb;
    cap_thread *th;
    coach_analyzer *an;
    coach_result res;
    app_wake wake;
    long analysed;
    char srcname[192];
    app_shots shots;     /* h5: snapshots, --auto, --on-ready */
} app_run;

static int analyse_newest(app_run *r, cap_frame *f)
{
    if (cap_mailbox_take(r->mb, f))
        return 0;
    coach_analyze(r->an, &f->view, f->t_capture, &r->res);
    r->analysed++;
    return 1;
}

/* Prints what happened to the source since the last look: one line per
 * event, the cause from the capture thread's status where it has one. */
static void report_events(app_run *r, int ev, char *line, size_t n)
{
    cap_thread_status(r->th, line, n);
    /* A loss followed by a return before we looked: the status now tells
     * the return, so the loss gets its own plain line. */
    if ((ev & EVB_LOST) && (ev & (EVB_BACK | EVB_END)))
        fprintf(stderr, "vfcoach: %s: camera lost\n", r->srcname);
    if (!line[0])
        snprintf(line, n, "%s: %s", r->srcname,
                 (ev & EVB_END) ? "source ended" : (ev & EVB_BACK) ? "camera back" : "camera lost");
    fprintf(stderr, "vfcoach: %s\n", line);
}

/* No window: JSON lines (--headless) or one status line a second. */
static int run_terminal(app_run *r)
{
    r->wake.efd = eventfd(0, EFD_CLOEXEC | EFD_NONBLOCK);
    if (r->wake.efd < 0) {
        fprintf(stderr, "vfcoach: eventfd: %s\n", strerror(errno));
        return 1;
    }
    r->th = cap_thread_start(r->src, r->mb, on_capture_event, &r->wake);
    r->src = NULL;
    if (!r->th) {
        fprintf(stderr, "vfcoach: %s: cannot start the capture thread\n", r->srcname);
        return 1;
    }
    if (!r->o->headless)
        fprintf(stderr, "vfcoach: no display found (DISPLAY/WAYLAND_DISPLAY unset): "
                        "printing one status line a second; Ctrl-C stops\n");
    double last_line = 0;
    int rc = 0;
    while (!g_stop) {
        struct pollfd p = {.fd = r->wake.efd, .events = POLLIN};
        int n = poll(&p, 1, 500);
        if (n < 0 && errno != EINTR)
            break;
        uint64_t cnt;
        if (n > 0 && read(r->wake.efd, &cnt, sizeof cnt) < 0 && errno != EAGAIN)
            break;
        int ev = __atomic_exchange_n(&r->wake.events, 0, __ATOMIC_ACQ_REL);
        if (ev) {
            char line[256];
            report_events(r, ev, line, sizeof line);
            if (ev & EVB_END) {
                rc = 1;
                break;
            }
        }
        if (app_shots_poll(&r->shots)) /* h5: on-ready exit status */
            fprintf(stderr, "vfcoach: %s\n", r->shots.msg);
        cap_frame f;
        if (!analyse_newest(r, &f))
            continue;
        if (app_shots_frame(&r->shots, &f.view, &r->res, r->o->profile)) /* h5 */
            fprintf(stderr, "vfcoach: %s\n", r->shots.msg);
        if (r->o->headless) {
            cap_stats st;
            cap_mailbox_stats(r->mb, &st);
            print_frame_json(&r->res, &f, &st, (now_s() - f.t_capture) * 1e3, r->o->stats);
        } else if (now_s() - last_line >= 1.0) {
            last_line = now_s();
            print_status_line(&r->res, r->srcname);
        }
        cap_mailbox_release(r->mb);
        if (r->o->frames && r->analysed >= r->o->frames)
            break;
    }
    return rc;
}

/* The SDL window. */
static int run_window(app_run *r)
{
    char err[256];
    if (SDL_Init(SDL_INIT_VIDEO | SDL_INIT_EVENTS) != 0) {
        fprintf(stderr, "vfcoach: cannot open the display: %s\n", SDL_GetError());
        return 1;
    }
    r->wake.sdl_event = SDL_RegisterEvents(1);
    if (r->wake.sdl_event == (Uint32)-1) {
        fprintf(stderr, "vfcoach: SDL: no user events left\n");
        SDL_Quit();
        return 1;
    }
    ovl_opts oo = {
        .width = 1280, .height = 720, .presenter = r->o->presenter, .display = r->o->display,
        .mirror = r->o->mirror, .tone = r->o->tone, .font_path = NULL, .title = "vfcoach",
        /* h5: */ .stats = r->o->stats, .grid = r->o->grid, .show = r->o->show,
        .screenshot = r->o->screenshot, .screenshot_after = r->o->frames,
    };
    ovl_window *win = ovl_create(&oo, err, sizeof err);
    if (!win) {
        fprintf(stderr, "vfcoach: %s\n", err);
        SDL_Quit();
        return 1;
    }
    r->th = cap_thread_start(r->src, r->mb, on_capture_event, &r->wake);
    r->src = NULL;
    if (!r->th) {
        fprintf(stderr, "vfcoach: %s: cannot start the capture thread\n", r->srcname);
        ovl_destroy(win);
        SDL_Quit();
        return 1;
    }
    printf("vfcoach: coaching on %s — press H for the keys, Esc or Q to quit\n", r->srcname);
    fflush(stdout);

    ovl_status st = {.source_name = r->srcname, .profile = r->o->profile};
    char message[256] = "";
    int have_result = 0, rc = 0;
    double fps_t0 = now_s();
    long fps_n = 0;
    /* whole-run figures for the --stats summary */
    double run_t0 = 0, lat_sum = 0, lat_max = 0;
    long run_n = 0;
    while (!g_stop) {
        SDL_Event e;
        if (!SDL_WaitEventTimeout(&e, 250)) {
            if (have_result)
                ovl_render(win, NULL, &r->res, &st);
            continue;
        }
        int frame_ready = 0;
        do {
            if (e.type == SDL_QUIT) {
                g_stop = 1;
            } else if (e.type == r->wake.sdl_event) {
                if (e.user.code == CAP_EV_FRAME)
                    frame_ready = 1;
            } else {
                ovl_action a = ovl_handle_event(win, &e);
                if (a == OVL_ACT_QUIT)
                    g_stop = 1;
                else if (a == OVL_ACT_NEXT_PROFILE) {
                    r->o->profile = (coach_profile)((r->o->profile + 1) % COACH_PROFILE_COUNT);
                    st.profile = r->o->profile;
                    coach_set_profile(r->an, r->o->profile);
                }
                else if (a == OVL_ACT_SNAPSHOT)
                    r->shots.pending = 1; /* h5: saved with the next frame */
            }
        } while (SDL_PollEvent(&e));

        int ev = __atomic_exchange_n(&r->wake.events, 0, __ATOMIC_ACQ_REL);
        if (ev) {
            report_events(r, ev, message, sizeof message);
            int last = __atomic_load_n(&r->wake.last, __ATOMIC_ACQUIRE);
            st.source_lost = (last == CAP_EV_LOST || last == CAP_EV_END);
            st.message = st.source_lost ? message : NULL;
        }
        if (app_shots_poll(&r->shots)) { /* h5: on-ready exit status */
            fprintf(stderr, "vfcoach: %s\n", r->shots.msg);
            ovl_notice(win, r->shots.msg);
        }
        cap_frame f;
        if (frame_ready && analyse_newest(r, &f)) {
            have_result = 1;
            if (app_shots_frame(&r->shots, &f.view, &r->res, r->o->profile)) { /* h5 */
                fprintf(stderr, "vfcoach: %s\n", r->shots.msg);
                ovl_notice(win, r->shots.msg);
            }
            cap_stats cs;
            cap_mailbox_stats(r->mb, &cs);
            st.dropped = cs.dropped;
            st.latency_ms = (now_s() - f.t_capture) * 1e3;
            ovl_render(win, &f, &r->res, &st);
            cap_mailbox_release(r->mb);
            fps_n++;
            double t = now_s();
            if (!run_n++)
                run_t0 = t;
            lat_sum += st.latency_ms;
            lat_max = st.latency_ms > lat_max ? st.latency_ms : lat_max;
            if (t - fps_t0 >= 1.0) {
                st.fps_shown = (double)fps_n / (t - fps_t0);
                fps_t0 = t;
                fps_n = 0;
            }
            if (r->o->frames && r->analysed >= r->o->frames)
                break;
        } else if (ev && have_result) {
            ovl_render(win, NULL, &r->res, &st);
        }
    }
    if (r->o->stats && run_n > 1) {
        cap_stats cs;
        cap_mailbox_stats(r->mb, &cs);
        fprintf(stderr, "vfcoach: %ld frames shown and analysed in %.1f s (%.1f fps), %" PRIu64
                " dropped of %" PRIu64 " captured, capture to screen %.1f ms mean, %.1f ms max\n",
                run_n, now_s() - run_t0, (double)(run_n - 1) / (now_s() - run_t0), cs.dropped,
                cs.published, lat_sum / (double)run_n, lat_max);
    }
    cap_thread_destroy(r->th);
    r->th = NULL;
    ovl_destroy(win);
    SDL_Quit();
    return rc;
}

static int have_display(void)
{
    const char *d = getenv("DISPLAY"), *wl = getenv("WAYLAND_DISPLAY");
    const char *drv = getenv("SDL_VIDEODRIVER");
    return (d && *d) || (wl && *wl) || (drv && *drv);
}

static int run_live(app_opts *o)
{
    char err[320];
    app_run r;
    memset(&r, 0, sizeof r);
    r.o = o;
    r.wake.efd = -1;

    const char *spec = o->source ? o->source : o->device;
    char cam[64];
    int camera = o->device != NULL;
    if (!spec && cap_default_camera(cam, sizeof cam) == 0) {
        spec = cam;
        camera = 1;
    }
    if (!spec) {
        spec = "demo";
        fprintf(stderr, "vfcoach: no camera found: showing the demo scene (harbour at dusk)\n");
    }
    cap_source_opts so = {.w = o->w, .h = o->h, .fps = o->fps, .seed = o->seed};
    /* A camera spec never falls through to stills (a folder is not a camera). */
    r.src = camera ? cap_camera_open(spec, &so, err, sizeof err) : cap_source_open(spec, &so, err, sizeof err);
    if (!r.src) {
        fprintf(stderr, "vfcoach: %s\n", err);
        return 1;
    }
    snprintf(r.srcname, sizeof r.srcname, "%s", cap_source_name(r.src));
    r.mb = cap_mailbox_create(cap_source_max_bytes(r.src));
    coach_config cfg;
    coach_config_default(&cfg);
    cfg.profile = o->profile;
    cfg.grid = o->grid;
    if (o->w > 0) {
        cfg.max_w = o->w;
        cfg.max_h = o->h;
    }
    r.an = coach_create(&cfg);
    if (!r.mb || !r.an) {
        fprintf(stderr, "vfcoach: %s: out of memory for the frame buffers\n", r.srcname);
        cap_source_destroy(r.src);
        cap_mailbox_destroy(r.mb);
        coach_destroy(r.an);
        return 1;
    }
    if (app_shots_init(&r.shots, o, r.srcname, err, sizeof err)) { /* h5 */
        fprintf(stderr, "vfcoach: --on-ready: %s\n", err);
        cap_source_destroy(r.src);
        cap_mailbox_destroy(r.mb);
        coach_destroy(r.an);
        return 2;
    }

    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);

    int rc = (o->headless || !have_display()) ? run_terminal(&r) : run_window(&r);

    cap_thread_destroy(r.th);
    cap_source_destroy(r.src);
    if (r.wake.efd >= 0)
        close(r.wake.efd);
    cap_mailbox_destroy(r.mb);
    coach_destroy(r.an);
    app_shots_fini(&r.shots); /* h5 */
    return rc;
}

/* ---- analyze ------------------------------------------------------------ */

int app_analyze_main(int argc, char **argv)
{
    coach_config cfg;
    coach_config_default(&cfg);
    int i = 1;
    for (; i < argc && argv[i][0] == '-' && argv[i][1] == '-'; i++) {
        if (!strcmp(argv[i], "--")) {
            i++;
            break;
        }
        if (i + 1 >= argc) {
            fprintf(stderr, "vfcoach analyze: option '%s' needs a value\n", argv[i]);
            return 2;
        }
        if (!strcmp(argv[i], "--profile")) {
            if (coach_profile_parse(argv[++i], &cfg.profile)) {
                fprintf(stderr, "vfcoach analyze: --profile '%s': expected landscape, portrait or product\n", argv[i]);
                return 2;
            }
        } else if (!strcmp(argv[i], "--grid")) {
            const char *g = argv[++i];
            if (!strcmp(g, "thirds"))
                cfg.grid = COACH_GRID_THIRDS;
            else if (!strcmp(g, "phi"))
                cfg.grid = COACH_GRID_PHI;
            else {
                fprintf(stderr, "vfcoach analyze: --grid '%s': expected thirds or phi\n", g);
                return 2;
            }
        } else {
            fprintf(stderr, "vfcoach analyze: unknown option '%s'\n", argv[i]);
            return 2;
        }
    }
    if (i >= argc) {
        fprintf(stderr, "vfcoach analyze: no files given (usage: vfcoach analyze FILE...)\n");
        return 2;
    }
    coach_analyzer *an = coach_create(&cfg);
    if (!an) {
        fprintf(stderr, "vfcoach analyze: out of memory\n");
        return 1;
    }
    static char buf[16384];
    int rc = 0;
    for (; i < argc; i++) {
        char err[320];
        coach_frame f;
        coach_result res;
        if (cap_image_load(argv[i], &f, err, sizeof err)) {
            fprintf(stderr, "vfcoach analyze: %s\n", err);
            rc = 1;
            continue;
        }
        coach_reset(an);
        if (coach_analyze(an, &f, 0.0, &res)) {
            fprintf(stderr, "vfcoach analyze: %s: cannot analyse this image\n", argv[i]);
            rc = 1;
        } else {
            int k = coach_json(&res, argv[i], buf, sizeof buf);
            if (k > 0 && (size_t)k < sizeof buf)
                printf("%s\n", buf);
        }
        cap_image_free(&f);
    }
    fflush(stdout);
    coach_destroy(an);
    return rc;
}

/* ---- main ----------------------------------------------------------- */

typedef struct app_cmd {
    const char *name;
    int (*fn)(int argc, char **argv);
} app_cmd;

static const app_cmd commands[] = {
    {"analyze", app_analyze_main},
    {"bench", app_bench_main},
    {"inspect", app_inspect_main},
};

int main(int argc, char **argv)
{
    if (argc > 1 && argv[1][0] != '-') {
        for (size_t i = 0; i < sizeof commands / sizeof commands[0]; i++)
            if (!strcmp(argv[1], commands[i].name))
                return commands[i].fn(argc - 1, argv + 1);
        fprintf(stderr, "vfcoach: unknown command '%s' (see --help)\n", argv[1]);
        return 2;
    }
    app_opts o;
    int p = parse_opts(argc, argv, &o);
    if (p < 0)
        return 2;
    if (p > 0)
        return 0;
    if (o.list)
        return app_list_cameras(stdout);
    return run_live(&o);
}
