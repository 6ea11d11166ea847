/* Snapshots (image + JSON sidecar, written to a temporary name then linked
 * into place) and the on-ready command (posix_spawnp, reaped with
 * waitpid WNOHANG so the UI never waits for it).
 *
 * Threads: the main thread, and one saver thread started with the first
 * live snapshot.  Queue: a single job slot (an RGB copy of the frame made
 * on the main thread, plus the result); a snapshot asked for while the slot
 * is full is dropped and reported.  The saver leaves one line for the main
 * thread's poll; app_shots_fini() lets a job in progress finish and joins.
 * The on-ready child process runs on its own; the main loop polls for it. */
#include <errno.h>
#include <fcntl.h>
#include <pthread.h>
#include <signal.h>
#include <spawn.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/time.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include <SDL.h>
#include <SDL_image.h>

#include "coach/app.h"

extern char **environ;

/* ---- the folder ---------------------------------------------------------- */

/* Reads XDG_PICTURES_DIR="$HOME/..." from user-dirs.dirs (the format the
 * xdg-user-dirs tool writes: one KEY="VALUE" a line, $HOME expanded only at
 * the start).  0 and the folder in buf, or -ENOENT. */
static int xdg_pictures(const char *home, char *buf, size_t n)
{
    char path[4096];
    const char *cfg = getenv("XDG_CONFIG_HOME");
    if (cfg && cfg[0] == '/')
        snprintf(path, sizeof path, "%s/user-dirs.dirs", cfg);
    else
        snprintf(path, sizeof path, "%s/.config/user-dirs.dirs", home);
    FILE *fp = fopen(path, "r");
    if (!fp)
        return -ENOENT;
    char line[4096];
    int rc = -ENOENT;
    while (rc && fgets(line, sizeof line, fp)) {
        const char *p = line;
        while (*p == ' ' || *p == '\t')
            p++;
        if (strncmp(p, "XDG_PICTURES_DIR=\"", 18))
            continue;
        p += 18;
        const char *end = strchr(p, '"');
        if (!end)
            continue;
        size_t len = (size_t)(end - p);
        int r;
        if (!strncmp(p, "$HOME", 5) && (p[5] == '/' || p + 5 == end))
            r = snprintf(buf, n, "%s%.*s", home, (int)(len - 5), p + 5);
        else if (p[0] == '/')
            r = snprintf(buf, n, "%.*s", (int)len, p);
        else
            continue; /* relative paths are not valid there */
        if (r > 0 && (size_t)r < n)
            rc = 0;
    }
    fclose(fp);
    /* A folder set to $HOME itself means "none": use ~/Pictures instead. */
    if (!rc && !strcmp(buf, home))
        rc = -ENOENT;
    return rc;
}

int app_snap_default_dir(char *buf, size_t n)
{
    const char *home = getenv("HOME");
    if (!home || home[0] != '/')
        return -ENOENT;
    char pics[4096];
    if (xdg_pictures(home, pics, sizeof pics))
        snprintf(pics, sizeof pics, "%s/Pictures", home);
    int r = snprintf(buf, n, "%s/vfcoach", pics);
    return r > 0 && (size_t)r < n ? 0 : -ENAMETOOLONG;
}

/* mkdir -p, the last level 0700 (snapshots are private data). */
static int make_dirs(const char *dir)
{
    char p[4096];
    int r = snprintf(p, sizeof p, "%s", dir);
    if (r <= 0 || (size_t)r >= sizeof p)
        return -ENAMETOOLONG;
    for (char *s = p + 1; *s; s++) {
        if (*s != '/')
            continue;
        *s = 0;
        if (mkdir(p, 0755) && errno != EEXIST)
            return -errno;
        *s = '/';
    }
    if (mkdir(p, 0700) && errno != EEXIST)
        return -errno;
    struct stat st;
    if (stat(p, &st))
        return -errno;
    return S_ISDIR(st.st_mode) ? 0 : -ENOTDIR;
}

/* ---- the image ------------------------------------------------------------- */

/* An RGB24 copy of the frame for SDL_image; NULL with an SDL error set. */
static SDL_Surface *frame_surface(const coach_frame *f)
{
    SDL_Surface *out = SDL_CreateRGBSurfaceWithFormat(0, f->w, f->h, 24, SDL_PIXELFORMAT_RGB24);
    if (!out)
        return NULL;
    int rc = 0;
    switch (f->format) {
    case COACH_FMT_XRGB8888:
        rc = SDL_ConvertPixels(f->w, f->h, SDL_PIXELFORMAT_XRGB8888, f->data, f->stride, SDL_PIXELFORMAT_RGB24,
                               out->pixels, out->pitch);
        break;
    case COACH_FMT_RGB24:
    case COACH_FMT_BGR24:
        rc = SDL_ConvertPixels(f->w, f->h, f->format == COACH_FMT_RGB24 ? SDL_PIXELFORMAT_RGB24 : SDL_PIXELFORMAT_BGR24,
                               f->data, f->stride, SDL_PIXELFORMAT_RGB24, out->pixels, out->pitch);
        break;
    case COACH_FMT_YUYV:
    case COACH_FMT_NV12: {
        SDL_SetYUVConversionMode(f->range == COACH_RANGE_FULL ? SDL_YUV_CONVERSION_JPEG
                                 : f->matrix == COACH_MATRIX_BT709 ? SDL_YUV_CONVERSION_BT709
                                                                   : SDL_YUV_CONVERSION_BT601);
        const void *src = f->data;
        void *tmp = NULL;
        if (f->format == COACH_FMT_NV12) {
            /* SDL wants the chroma plane right after the luma plane */
            int s2 = f->stride2 ? f->stride2 : f->stride;
            const uint8_t *uv = f->data2 ? f->data2 : f->data + (size_t)f->stride * f->h;
            if (uv != f->data + (size_t)f->stride * f->h || s2 != f->stride) {
                tmp = malloc((size_t)f->stride * (f->h + (f->h + 1) / 2));
                if (!tmp) {
                    SDL_SetError("out of memory");
                    rc = -1;
                    break;
                }
                memcpy(tmp, f->data, (size_t)f->stride * f->h);
                for (int y = 0; y < (f->h + 1) / 2; y++)
                    memcpy((uint8_t *)tmp + (size_t)f->stride * (f->h + y), uv + (size_t)s2 * y,
                           (size_t)(f->w < s2 ? f->w : s2));
                src = tmp;
            }
        }
        rc = SDL_ConvertPixels(f->w, f->h, f->format == COACH_FMT_YUYV ? SDL_PIXELFORMAT_YUY2 : SDL_PIXELFORMAT_NV12,
                               src, f->stride, SDL_PIXELFORMAT_RGB24, out->pixels, out->pitch);
        free(tmp);
        break;
    }
    case COACH_FMT_GREY:
        for (int y = 0; y < f->h; y++) {
            const uint8_t *s = f->data + (size_t)y * f->stride;
            uint8_t *d = (uint8_t *)out->pixels + (size_t)y * out->pitch;
            for (int x = 0; x < f->w; x++)
                d[3 * x] = d[3 * x + 1] = d[3 * x + 2] = s[x];
        }
        break;
    default:
        SDL_SetError("pixel format %s cannot be saved", coach_format_name(f->format));
        rc = -1;
    }
    if (rc) {
        SDL_FreeSurface(out);
        return NULL;
    }
    return out;
}

/* An SDL_RWops over our own fd that remembers the first write error:
 * SDL_image's encoders do not all report a short write, and a truncated
 * image must never be renamed into place. */
typedef struct fd_writer {
    int fd;
    int err;  /* first errno, 0 none */
} fd_writer;

static Sint64 fdw_size(SDL_RWops *c)
{
    fd_writer *w = c->hidden.unknown.data1;
    struct stat st;
    return fstat(w->fd, &st) ? -1 : (Sint64)st.st_size;
}

static Sint64 fdw_seek(SDL_RWops *c, Sint64 off, int whence)
{
    fd_writer *w = c->hidden.unknown.data1;
    int wh = whence == RW_SEEK_SET ? SEEK_SET : whence == RW_SEEK_CUR ? SEEK_CUR : SEEK_END;
    off_t r = lseek(w->fd, (off_t)off, wh);
    if (r < 0 && !w->err)
        w->err = errno;
    return r < 0 ? -1 : (Sint64)r;
}

static size_t fdw_read(SDL_RWops *c, void *p, size_t size, size_t n)
{
    (void)c; (void)p; (void)size; (void)n;
    SDL_SetError("snapshot writer cannot read");
    return 0;
}

static size_t fdw_write(SDL_RWops *c, const void *p, size_t size, size_t n)
{
    fd_writer *w = c->hidden.unknown.data1;
    size_t total = size * n, done = 0;
    while (!w->err && done < total) {
        ssize_t k = write(w->fd, (const char *)p + done, total - done);
        if (k < 0 && errno == EINTR)
            continue;
        if (k <= 0)
            w->err = k < 0 ? errno : EIO;
        else
            done += (size_t)k;
    }
    if (w->err)
        SDL_SetError("%s", strerror(w->err));
    return size ? done / size : 0;
}

static int fdw_close(SDL_RWops *c)
{
    SDL_FreeRW(c); /* the fd stays ours */
    return 0;
}

/* Encodes s into fd as PNG or JPEG and syncs; 0 or a negative errno. */
static int save_image(SDL_Surface *s, int fd, int jpeg)
{
    fd_writer w = {fd, 0};
    SDL_RWops *rw = SDL_AllocRW();
    if (!rw)
        return -ENOMEM;
    rw->size = fdw_size;
    rw->seek = fdw_seek;
    rw->read = fdw_read;
    rw->write = fdw_write;
    rw->close = fdw_close;
    rw->type = SDL_RWOPS_UNKNOWN;
    rw->hidden.unknown.data1 = &w;
    int r = jpeg ? IMG_SaveJPG_RW(s, rw, 1, 92) : IMG_SavePNG_RW(s, rw, 1);
    if (w.err)
        return -w.err;
    if (r != 0)
        return -EIO;
    return fsync(fd) ? -errno : 0;
}

/* ---- the sidecar -------------------------------------------------------------- */

static void json_str(FILE *fp, const char *s)
{
    fputc('"', fp);
    for (const unsigned char *p = (const unsigned char *)(s ? s : ""); *p; p++) {
        if (*p == '"' || *p == '\\')
            fprintf(fp, "\\%c", *p);
        else if (*p < 0x20)
            fprintf(fp, "\\u%04x", *p);
        else
            fputc(*p, fp);
    }
    fputc('"', fp);
}

static int write_sidecar(int fd, const char *image, const char *when, const coach_frame *f,
                         const coach_result *r, coach_profile profile, const char *source)
{
    size_t cap = 16384;
    char *m = NULL;
    for (;;) {
        char *n = realloc(m, cap);
        if (!n) {
            free(m);
            close(fd);
            return -ENOMEM;
        }
        m = n;
        int k = coach_json(r, NULL, m, cap);
        if (k < 0) {
            free(m);
            close(fd);
            return -EINVAL;
        }
        if ((size_t)k < cap)
            break;
        cap = (size_t)k + 1;
    }
    FILE *fp = fdopen(fd, "w");
    if (!fp) {
        int e = -errno;
        free(m);
        close(fd);
        return e;
    }
    fputs("{\"image\":", fp);
    json_str(fp, image);
    fputs(",\"time\":", fp);
    json_str(fp, when);
    fputs(",\"profile\":", fp);
    json_str(fp, coach_profile_name(profile));
    fputs(",\"source\":", fp);
    json_str(fp, source);
    fprintf(fp, ",\"frame\":{\"width\":%d,\"height\":%d,\"format\":\"%s\"}", f->w, f->h,
            coach_format_name(f->format));
    fprintf(fp, ",\"measurements\":%s}\n", m);
    free(m);
    int rc = 0;
    if (fflush(fp) || ferror(fp) || fsync(fileno(fp)))
        rc = errno ? -errno : -EIO;
    if (fclose(fp) && !rc)
        rc = errno ? -errno : -EIO;
    return rc;
}

/* Local time as 2026-12-01T22:45:12.345+01:00 (ISO 8601 extended format). */
static void iso_time(const struct timeval *tv, char *buf, size_t n, char *stamp, size_t sn)
{
    struct tm tm;
    time_t t = tv->tv_sec;
    localtime_r(&t, &tm);
    char a[32], z[8];
    strftime(a, sizeof a, "%Y-%m-%dT%H:%M:%S", &tm);
    strftime(z, sizeof z, "%z", &tm); /* +hhmm */
    int ms = (int)(tv->tv_usec / 1000);
    snprintf(buf, n, "%s.%03d%.3s:%.2s", a, ms, z, z + 3);
    char b[32];
    strftime(b, sizeof b, "%Y%m%d-%H%M%S", &tm);
    snprintf(stamp, sn, "%s-%03d", b, ms);
}

/* Puts tmp at final without replacing anything there: link() fails with
 * EEXIST instead of clobbering.  Filesystems without hard links (FAT on a
 * card) fall back to checking then renaming. */
static int place(const char *tmp, const char *final)
{
    if (link(tmp, final) == 0) {
        unlink(tmp); /* the data is in place; a stray temp name is harmless */
        return 0;
    }
    if (errno == EEXIST)
        return -EEXIST;
    if (errno != EPERM && errno != ENOTSUP && errno != EOPNOTSUPP && errno != EMLINK)
        return -errno;
    if (access(final, F_OK) == 0)
        return -EEXIST;
    return rename(tmp, final) ? -errno : 0;
}

/* Writes an already converted image s (and the sidecar for frame f, whose
 * pixels are not read) taken at tv.  Any thread. */
static int snap_write(const char *dir, SDL_Surface *s, const coach_frame *f, const struct timeval *tv,
                      const coach_result *r, coach_profile profile, const char *source, int jpeg, char *path,
                      size_t pathlen, char *err, size_t errlen)
{
    int rc = make_dirs(dir);
    if (rc) {
        snprintf(err, errlen, "snapshot folder '%.900s': %s", dir, strerror(-rc));
        return rc;
    }
    char when[48], stamp[40];
    iso_time(tv, when, sizeof when, stamp, sizeof stamp);

    char timg[4200], tjson[4200], fimg[4200], fjson[4200];
    snprintf(timg, sizeof timg, "%s/.vfcoach-snap-XXXXXX", dir);
    snprintf(tjson, sizeof tjson, "%s/.vfcoach-meta-XXXXXX", dir);
    int fi = mkostemp(timg, O_CLOEXEC);
    if (fi < 0) {
        rc = -errno;
        snprintf(err, errlen, "snapshot folder '%s': cannot write there: %s", dir, strerror(-rc));
        return rc;
    }
    int fj = mkostemp(tjson, O_CLOEXEC);
    if (fj < 0) {
        rc = -errno;
        snprintf(err, errlen, "snapshot folder '%s': cannot write there: %s", dir, strerror(-rc));
        close(fi);
        unlink(timg);
        return rc;
    }

    rc = save_image(s, fi, jpeg);
    if (close(fi) && !rc)
        rc = -errno;
    if (rc) {
        snprintf(err, errlen, "snapshot in '%s': cannot write the image: %s", dir,
                 rc == -EIO ? SDL_GetError() : strerror(-rc));
        close(fj);
        goto fail;
    }
    /* the final name: the time to the millisecond, -2, -3... if taken */
    const char *ext = jpeg ? "jpg" : "png";
    int placed = 0;
    for (int i = 1; i <= 99 && !placed; i++) {
        char suffix[8] = "";
        if (i > 1)
            snprintf(suffix, sizeof suffix, "-%d", i);
        snprintf(fimg, sizeof fimg, "%s/vfcoach-%s%s.%s", dir, stamp, suffix, ext);
        snprintf(fjson, sizeof fjson, "%s/vfcoach-%s%s.json", dir, stamp, suffix);
        if (access(fjson, F_OK) == 0)
            continue;
        const char *base = strrchr(fimg, '/') + 1;
        rc = write_sidecar(fj, base, when, f, r, profile, source);
        fj = -1;
        if (rc) {
            snprintf(err, errlen, "snapshot '%s': cannot write the sidecar: %s", tjson, strerror(-rc));
            goto fail;
        }
        rc = place(timg, fimg);
        if (rc == -EEXIST) {
            /* rewrite the sidecar for the next name */
            fj = open(tjson, O_WRONLY | O_TRUNC | O_CLOEXEC);
            if (fj < 0) {
                rc = -errno;
                snprintf(err, errlen, "snapshot '%s': %s", tjson, strerror(-rc));
                goto fail;
            }
            continue;
        }
        if (rc) {
            snprintf(err, errlen, "snapshot '%s': cannot rename into place: %s", fimg, strerror(-rc));
            goto fail;
        }
        if (rename(tjson, fjson)) {
            rc = -errno;
            snprintf(err, errlen, "snapshot '%s': cannot rename into place: %s", fjson, strerror(-rc));
            unlink(fimg);
            goto fail;
        }
        placed = 1;
    }
    if (!placed) {
        if (fj >= 0)
            close(fj);
        rc = -EEXIST;
        snprintf(err, errlen, "snapshot folder '%s': no free name for %s", dir, stamp);
        goto fail;
    }
    if (path && pathlen)
        snprintf(path, pathlen, "%s", fimg);
    return 0;
fail:
    unlink(timg);
    unlink(tjson);
    return rc;
}

int app_snap_save(const char *dir, const coach_frame *f, const coach_result *r, coach_profile profile,
                  const char *source, int jpeg, char *path, size_t pathlen, char *err, size_t errlen)
{
    char dummy[8];
    if (!err) {
        err = dummy;
        errlen = sizeof dummy;
    }
    if (path && pathlen)
        path[0] = 0;
    if (!dir || !f || !f->data || f->w <= 0 || f->h <= 0 || !r) {
        snprintf(err, errlen, "snapshot: no frame to save");
        return -EINVAL;
    }
    struct timeval tv;
    gettimeofday(&tv, NULL);
    SDL_Surface *s = frame_surface(f);
    if (!s) {
        snprintf(err, errlen, "snapshot: cannot convert the %dx%d %s frame: %s", f->w, f->h,
                 coach_format_name(f->format), SDL_GetError());
        return -EINVAL;
    }
    int rc = snap_write(dir, s, f, &tv, r, profile, source, jpeg, path, pathlen, err, errlen);
    SDL_FreeSurface(s);
    return rc;
}

/* ---- the on-ready command --------------------------------------------------------- */

#define HOOK_ARGS 64

struct app_hook {
    char line[1024];     /* for messages                                  */
    char *argv[HOOK_ARGS];
    char *store;
    pid_t pid;           /* running child, 0 none                        */
    unsigned runs;
};

int app_hook_split(const char *line, char **argv, int max, char *store, size_t storelen, char *err,
                   size_t errlen)
{
    char dummy[8];
    if (!err) {
        err = dummy;
        errlen = sizeof dummy;
    }
    if (!line || max < 2 || !store || storelen == 0) {
        snprintf(err, errlen, "command: nothing to run");
        return -EINVAL;
    }
    int argc = 0;
    size_t o = 0;
    const char *p = line;
    for (;;) {
        while (*p == ' ' || *p == '\t' || *p == '\n')
            p++;
        if (!*p)
            break;
        if (argc >= max - 1) {
            snprintf(err, errlen, "command '%s': more than %d arguments", line, max - 1);
            return -E2BIG;
        }
        argv[argc++] = store + o;
        /* one word: runs of plain, quoted and escaped characters */
        while (*p && *p != ' ' && *p != '\t' && *p != '\n') {
            char c = *p++;
            if (c == '\'') {
                while (*p && *p != '\'') {
                    if (o + 1 >= storelen)
                        goto big;
                    store[o++] = *p++;
                }
                if (!*p) {
                    snprintf(err, errlen, "command '%s': a single quote is not closed", line);
                    return -EINVAL;
                }
                p++;
            } else if (c == '"') {
                while (*p && *p != '"') {
                    char d = *p++;
                    /* POSIX: inside double quotes a backslash escapes only
                     * $ ` " \ and newline; elsewhere it stays literal */
                    if (d == '\\' && *p && strchr("$`\"\\\n", *p))
                        d = *p++;
                    if (o + 1 >= storelen)
                        goto big;
                    store[o++] = d;
                }
                if (!*p) {
                    snprintf(err, errlen, "command '%s': a double quote is not closed", line);
                    return -EINVAL;
                }
                p++;
            } else {
                if (c == '\\') {
                    if (!*p) {
                        snprintf(err, errlen, "command '%s': ends with a lone backslash", line);
                        return -EINVAL;
                    }
                    c = *p++;
                }
                if (o + 1 >= storelen)
                    goto big;
                store[o++] = c;
            }
        }
        if (o >= storelen)
            goto big;
        store[o++] = 0;
    }
    argv[argc] = NULL;
    if (argc == 0) {
        snprintf(err, errlen, "command '%s': it is empty", line);
        return -EINVAL;
    }
    return argc;
big:
    snprintf(err, errlen, "command '%.80s': too long", line);
    return -E2BIG;
}

app_hook *app_hook_create(const char *line, char *err, size_t errlen)
{
    app_hook *h = calloc(1, sizeof *h);
    size_t n = line ? strlen(line) + 1 : 1;
    if (!h || !(h->store = malloc(n))) {
        free(h);
        snprintf(err, errlen, "on-ready command: out of memory");
        return NULL;
    }
    snprintf(h->line, sizeof h->line, "%s", line ? line : "");
    if (app_hook_split(line, h->argv, HOOK_ARGS, h->store, n, err, errlen) < 0) {
        app_hook_destroy(h);
        return NULL;
    }
    return h;
}

void app_hook_destroy(app_hook *h)
{
    if (!h)
        return;
    if (h->pid > 0)
        waitpid(h->pid, NULL, WNOHANG); /* a child still running is left to finish */
    free(h->store);
    free(h);
}

int app_hook_running(const app_hook *h)
{
    return h && h->pid > 0;
}

int app_hook_start(app_hook *h, char *msg, size_t n)
{
    if (!h)
        return -EINVAL;
    if (h->pid > 0) {
        snprintf(msg, n, "on-ready: '%s' is still running; not started again", h->argv[0]);
        return -EBUSY;
    }
    posix_spawn_file_actions_t fa;
    posix_spawnattr_t at;
    posix_spawn_file_actions_init(&fa);
    posix_spawnattr_init(&at);
    /* no terminal input for the child: it must not steal keys */
    posix_spawn_file_actions_addopen(&fa, 0, "/dev/null", O_RDONLY, 0);
    /* default signal dispositions and an empty mask, whatever ours are */
    sigset_t def, none;
    sigemptyset(&def);
    sigaddset(&def, SIGINT);
    sigaddset(&def, SIGTERM);
    sigaddset(&def, SIGPIPE);
    sigaddset(&def, SIGCHLD);
    sigemptyset(&none);
    posix_spawnattr_setsigdefault(&at, &def);
    posix_spawnattr_setsigmask(&at, &none);
    posix_spawnattr_setflags(&at, POSIX_SPAWN_SETSIGDEF | POSIX_SPAWN_SETSIGMASK);
    pid_t pid;
    int e = posix_spawnp(&pid, h->argv[0], &fa, &at, h->argv, environ);
    posix_spawn_file_actions_destroy(&fa);
    posix_spawnattr_destroy(&at);
    if (e) {
        snprintf(msg, n, "on-ready: cannot run '%s': %s", h->argv[0], strerror(e));
        return -e;
    }
    h->pid = pid;
    h->runs++;
    snprintf(msg, n, "on-ready: started '%s' (run %u)", h->argv[0], h->runs);
    return 0;
}

int app_hook_poll(app_hook *h, int *status, char *msg, size_t n)
{
    if (!h || h->pid <= 0)
        return 0;
    int st = 0;
    pid_t r = waitpid(h->pid, &st, WNOHANG);
    if (r == 0)
        return 0;
    if (r < 0) {
        /* reaped elsewhere (e.g. SIGCHLD ignored): the status is unknown */
        snprintf(msg, n, "on-ready: '%s' ended (status unknown: %s)", h->argv[0], strerror(errno));
        h->pid = 0;
        if (status)
            *status = -1;
        return 1;
    }
    h->pid = 0;
    if (status)
        *status = st;
    if (WIFEXITED(st))
        snprintf(msg, n, "on-ready: '%s' exited with status %d%s", h->argv[0], WEXITSTATUS(st),
                 WEXITSTATUS(st) ? " (failed)" : "");
    else if (WIFSIGNALED(st))
        snprintf(msg, n, "on-ready: '%s' was killed by signal %d", h->argv[0], WTERMSIG(st));
    else
        snprintf(msg, n, "on-ready: '%s' ended", h->argv[0]);
    return 1;
}

/* ---- the live loop's duties ------------------------------------------------------------ */

/* Encoding a 1080p PNG takes about a second, so the live loop hands each
 * snapshot to one saver thread: the main thread converts the frame into a
 * new RGB surface (the copy that outlives the mailbox buffer) and queues
 * it; the saver writes it and leaves a line for app_shots_poll().  One job
 * at a time: a snapshot asked for while one is being written is skipped,
 * and said so. */
struct app_saver {
    pthread_t th;
    int started;
    pthread_mutex_t mu;
    pthread_cond_t cv;
    int quit;            /* guarded by mu: finish the queued job, then end */
    SDL_Surface *job;    /* guarded by mu: queued or being written, NULL idle */
    int done;            /* guarded by mu: a finished job's line is in msg */
    /* job parameters: written by the main thread only while job == NULL */
    coach_frame meta;
    coach_result res;
    coach_profile profile;
    int jpeg;
    struct timeval tv;
    char dir[4096];
    char source[256];
    char msg[1024];      /* guarded by mu */
};

static void *saver_main(void *arg)
{
    struct app_saver *sv = arg;
    pthread_mutex_lock(&sv->mu);
    for (;;) {
        while (!sv->job && !sv->quit)
            pthread_cond_wait(&sv->cv, &sv->mu);
        if (!sv->job)
            break;
        SDL_Surface *s = sv->job;
        pthread_mutex_unlock(&sv->mu);
        char path[4200], err[1024], line[1024];
        int rc = snap_write(sv->dir, s, &sv->meta, &sv->tv, &sv->res, sv->profile, sv->source, sv->jpeg, path,
                            sizeof path, err, sizeof err);
        if (rc)
            snprintf(line, sizeof line, "%s", err);
        else
            snprintf(line, sizeof line, "Saved %.1000s", path);
        SDL_FreeSurface(s);
        pthread_mutex_lock(&sv->mu);
        memcpy(sv->msg, line, sizeof line);
        sv->done = 1;
        sv->job = NULL;
    }
    pthread_mutex_unlock(&sv->mu);
    return NULL;
}

int app_shots_init(app_shots *s, const app_opts *o, const char *source, char *err, size_t errlen)
{
    memset(s, 0, sizeof *s);
    s->auto_snap = o->auto_snap;
    s->jpeg = o->snap_jpeg;
    s->source = source;
    if (o->out_dir)
        snprintf(s->dir, sizeof s->dir, "%s", o->out_dir);
    else if (app_snap_default_dir(s->dir, sizeof s->dir))
        s->dir[0] = 0;
    if (o->on_ready) {
        s->hook = app_hook_create(o->on_ready, err, errlen);
        if (!s->hook)
            return -EINVAL;
    }
    return 0;
}

void app_shots_fini(app_shots *s)
{
    if (!s)
        return;
    struct app_saver *sv = s->saver;
    if (sv) {
        if (sv->started) {
            /* a snapshot being written is finished, never cut short */
            pthread_mutex_lock(&sv->mu);
            sv->quit = 1;
            pthread_cond_signal(&sv->cv);
            pthread_mutex_unlock(&sv->mu);
            pthread_join(sv->th, NULL);
            if (sv->done)
                fprintf(stderr, "vfcoach: %s\n", sv->msg);
        }
        pthread_mutex_destroy(&sv->mu);
        pthread_cond_destroy(&sv->cv);
        free(sv);
        s->saver = NULL;
    }
    app_hook_destroy(s->hook);
    s->hook = NULL;
}

static int saver_start(app_shots *s)
{
    if (s->saver)
        return 0;
    struct app_saver *sv = calloc(1, sizeof *sv);
    if (!sv)
        return -ENOMEM;
    pthread_mutex_init(&sv->mu, NULL);
    pthread_cond_init(&sv->cv, NULL);
    int e = pthread_create(&sv->th, NULL, saver_main, sv);
    if (e) {
        pthread_mutex_destroy(&sv->mu);
        pthread_cond_destroy(&sv->cv);
        free(sv);
        return -e;
    }
    sv->started = 1;
    s->saver = sv;
    return 0;
}

/* Queues f for saving; 0 queued (the line comes later), 1 a line now. */
static int queue_snapshot(app_shots *s, const coach_frame *f, const coach_result *r, coach_profile p)
{
    if (!s->dir[0]) {
        snprintf(s->msg, sizeof s->msg, "snapshot: no folder (no HOME): give one with --out DIR");
        return 1;
    }
    int e = saver_start(s);
    if (e) {
        snprintf(s->msg, sizeof s->msg, "snapshot: cannot start the saver: %s", strerror(-e));
        return 1;
    }
    struct app_saver *sv = s->saver;
    pthread_mutex_lock(&sv->mu);
    int busy = sv->job != NULL;
    pthread_mutex_unlock(&sv->mu);
    if (busy) {
        snprintf(s->msg, sizeof s->msg, "snapshot skipped: the previous one is still being written");
        return 1;
    }
    struct timeval tv;
    gettimeofday(&tv, NULL);
    SDL_Surface *surf = frame_surface(f);
    if (!surf) {
        snprintf(s->msg, sizeof s->msg, "snapshot: cannot convert the %dx%d %s frame: %s", f->w, f->h,
                 coach_format_name(f->format), SDL_GetError());
        return 1;
    }
    /* the saver is idle: its parameters are ours to fill until job is set */
    sv->meta = *f;
    sv->meta.data = sv->meta.data2 = NULL;
    sv->res = *r;
    sv->profile = p;
    sv->jpeg = s->jpeg;
    sv->tv = tv;
    snprintf(sv->dir, sizeof sv->dir, "%s", s->dir);
    snprintf(sv->source, sizeof sv->source, "%s", s->source ? s->source : "");
    pthread_mutex_lock(&sv->mu);
    sv->job = surf;
    pthread_cond_signal(&sv->cv);
    pthread_mutex_unlock(&sv->mu);
    return 0;
}

int app_shots_frame(app_shots *s, const coach_frame *f, const coach_result *r, coach_profile p)
{
    int lines = 0;
    int rising = r->ready && !s->prev_ready;
    s->prev_ready = r->ready;
    if (s->pending || (rising && s->auto_snap)) {
        s->pending = 0;
        lines += queue_snapshot(s, f, r, p);
    }
    if (rising && s->hook) {
        if (lines)
            fprintf(stderr, "vfcoach: %s\n", s->msg); /* the earlier line of this frame */
        app_hook_start(s->hook, s->msg, sizeof s->msg);
        lines++;
    }
    return lines;
}

int app_shots_poll(app_shots *s)
{
    struct app_saver *sv = s->saver;
    if (sv) {
        pthread_mutex_lock(&sv->mu);
        int done = sv->done;
        if (done) {
            memcpy(s->msg, sv->msg, sizeof s->msg);
            sv->done = 0;
        }
        pthread_mutex_unlock(&sv->mu);
        if (done)
            return 1;
    }
    return s->hook ? app_hook_poll(s->hook, NULL, s->msg, sizeof s->msg) : 0;
}

int app_shots_busy(const app_shots *s)
{
    int b = 0;
    struct app_saver *sv = s->saver;
    if (sv) {
        pthread_mutex_lock(&sv->mu);
        b = sv->job != NULL || sv->done;
        pthread_mutex_unlock(&sv->mu);
    }
    return b || app_hook_running(s->hook);
}
