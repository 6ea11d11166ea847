/* Still images as a source: one PNG/JPEG, or a folder of them shown in turn.
 *
 * Sizes come from the file headers at open (so the mailbox can be sized for
 * the largest image without decoding every file); images are decoded one at
 * a time when their turn comes, on the capture thread.  A still is
 * republished at the source rate so the UI keeps analysing it like a live
 * view.  Images larger than 3840x2160 are shrunk by a whole factor (box
 * average) so a folder of phone photos does not need gigabytes of buffers.
 *
 * Threads: cap_image_load() may be called on any thread (the analyse command
 * on the main one, the source on the capture thread); SDL_image is set up
 * once through pthread_once and SDL keeps its error text per thread.  A
 * still source, once started, is used by the capture thread alone.
 */
#include <dirent.h>
#include <errno.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include <SDL.h>
#include <SDL_image.h>

#include "capture/capture_internal.h"

#define MAX_SIDE 16384        /* larger images are refused, not guessed at      */
#define PLAY_W 3840           /* stills beyond this are shrunk for playback     */
#define PLAY_H 2160
#define SECONDS_PER_STILL 4.0 /* folder playback: each image this long          */

/* One line into a fixed buffer; a long path may cut it short, which is
 * better than no line at all. */
static void put_line(char *buf, size_t n, const char *fmt, ...) __attribute__((format(printf, 3, 4)));
static void put_line(char *buf, size_t n, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, n, fmt, ap);
    va_end(ap);
}

/* ---- format sniffing and header sizes ---------------------------------- */

enum { KIND_NONE = 0, KIND_PNG, KIND_JPEG };

static int sniff(const uint8_t *b, size_t n)
{
    /* PNG signature: W3C PNG specification (2nd ed.), section 5.2. */
    static const uint8_t png[8] = {0x89, 'P', 'N', 'G', '\r', '\n', 0x1A, '\n'};
    if (n >= 8 && !memcmp(b, png, 8))
        return KIND_PNG;
    /* JPEG starts with SOI then another marker: ITU-T T.81, B.1.1.3. */
    if (n >= 3 && b[0] == 0xFF && b[1] == 0xD8 && b[2] == 0xFF)
        return KIND_JPEG;
    return KIND_NONE;
}

/* Reads width and height from the header without decoding.  0, or a
 * negative errno with a cause in *why. */
static int header_size(const char *path, int *kind, int *w, int *h, const char **why)
{
    FILE *f = fopen(path, "rb");
    if (!f) {
        int e = errno;
        *why = strerror(e);
        return -e;
    }
    struct stat st;
    if (fstat(fileno(f), &st) == 0 && S_ISDIR(st.st_mode)) {
        fclose(f);
        *why = "is a folder, not an image";
        return -EISDIR;
    }
    uint8_t b[32];
    size_t n = fread(b, 1, sizeof b, f);
    *kind = sniff(b, n);
    int rc = -EINVAL;
    *why = "not a PNG or JPEG image";
    if (*kind == KIND_PNG) {
        /* IHDR is the first chunk: length, "IHDR", width, height (big endian),
         * W3C PNG specification, section 11.2.2. */
        if (n >= 24 && !memcmp(b + 12, "IHDR", 4)) {
            *w = (int)((uint32_t)b[16] << 24 | (uint32_t)b[17] << 16 | (uint32_t)b[18] << 8 | b[19]);
            *h = (int)((uint32_t)b[20] << 24 | (uint32_t)b[21] << 16 | (uint32_t)b[22] << 8 | b[23]);
            rc = 0;
        } else {
            *why = "damaged PNG header";
        }
    } else if (*kind == KIND_JPEG) {
        /* Walk the marker segments to the frame header (SOFn): Lf, P, Y, X,
         * ITU-T T.81, B.2.2.  SOF markers are C0..CF except C4, C8, CC. */
        *why = "damaged JPEG header (no frame header)";
        if (fseek(f, 2, SEEK_SET) == 0) {
            for (int guard = 0; guard < 4096; guard++) {
                int c = fgetc(f);
                if (c != 0xFF)
                    break;
                int m;
                do
                    m = fgetc(f);
                while (m == 0xFF);
                if (m == EOF || m == 0xD9 || m == 0xDA)
                    break;
                if (m == 0x01 || (m >= 0xD0 && m <= 0xD7))
                    continue; /* markers without a length */
                uint8_t seg[7];
                if (fread(seg, 1, 2, f) != 2)
                    break;
                int len = seg[0] << 8 | seg[1];
                if (len < 2)
                    break;
                if (m >= 0xC0 && m <= 0xCF && m != 0xC4 && m != 0xC8 && m != 0xCC) {
                    if (fread(seg + 2, 1, 5, f) != 5)
                        break;
                    *h = seg[3] << 8 | seg[4];
                    *w = seg[5] << 8 | seg[6];
                    rc = 0;
                    break;
                }
                if (fseek(f, len - 2, SEEK_CUR) != 0)
                    break;
            }
        }
    }
    fclose(f);
    if (rc == 0 && (*w <= 0 || *h <= 0 || *w > MAX_SIDE || *h > MAX_SIDE)) {
        *why = "image size out of range (1..16384 pixels a side)";
        rc = -EFBIG;
    }
    return rc;
}

static uint32_t crc_table[256];
static void crc_init(void)
{
    for (uint32_t i = 0; i < 256; i++) {
        uint32_t c = i;
        for (int k = 0; k < 8; k++)
            c = c & 1 ? 0xEDB88320u ^ (c >> 1) : c >> 1;
        crc_table[i] = c;
    }
}

/* Walks a PNG's chunks and checks each CRC (W3C PNG specification,
 * sections 5.3 and 5.5: CRC-32 of ISO 3309 over type and data) up to IEND,
 * so damaged files are refused here with a clear cause instead of inside
 * libpng, which would also print its own message on stderr. */
static int png_check(const char *path, const char **why)
{
    static pthread_once_t once = PTHREAD_ONCE_INIT;
    pthread_once(&once, crc_init);
    FILE *f = fopen(path, "rb");
    if (!f) {
        int e = errno;
        *why = strerror(e);
        return -e;
    }
    uint8_t buf[65536];
    int rc = -EINVAL;
    *why = "damaged PNG (truncated)";
    if (fseek(f, 8, SEEK_SET) == 0) {
        for (;;) {
            uint8_t head[8];
            if (fread(head, 1, 8, f) != 8)
                break;
            uint32_t len = (uint32_t)head[0] << 24 | (uint32_t)head[1] << 16 |
                           (uint32_t)head[2] << 8 | head[3];
            if (len > 0x7FFFFFFFu)
                break;
            uint32_t crc = 0xFFFFFFFFu;
            for (int i = 4; i < 8; i++)
                crc = crc_table[(crc ^ head[i]) & 0xFF] ^ (crc >> 8);
            uint32_t left = len;
            while (left > 0) {
                size_t n = left < sizeof buf ? left : sizeof buf;
                if (fread(buf, 1, n, f) != n)
                    break;
                for (size_t i = 0; i < n; i++)
                    crc = crc_table[(crc ^ buf[i]) & 0xFF] ^ (crc >> 8);
                left -= (uint32_t)n;
            }
            uint8_t tail[4];
            if (left > 0 || fread(tail, 1, 4, f) != 4)
                break;
            uint32_t want = (uint32_t)tail[0] << 24 | (uint32_t)tail[1] << 16 |
                            (uint32_t)tail[2] << 8 | tail[3];
            if ((crc ^ 0xFFFFFFFFu) != want) {
                *why = "damaged PNG (checksum mismatch)";
                break;
            }
            if (!memcmp(head + 4, "IEND", 4)) {
                rc = 0;
                break;
            }
        }
    }
    fclose(f);
    return rc;
}

/* ---- decoding ----------------------------------------------------------- */

static pthread_once_t img_once = PTHREAD_ONCE_INIT;
static void img_init(void)
{
    IMG_Init(IMG_INIT_PNG | IMG_INIT_JPG);
}

/* Decodes path into an XRGB8888 surface; NULL with one line in err. */
static SDL_Surface *decode(const char *path, char *err, size_t errlen, int *errnum)
{
    int kind, w, h;
    const char *why;
    int rc = header_size(path, &kind, &w, &h, &why);
    if (rc < 0) {
        put_line(err, errlen, "%s: %s", path, why);
        *errnum = rc;
        return NULL;
    }
    if (kind == KIND_PNG && (rc = png_check(path, &why)) < 0) {
        put_line(err, errlen, "%s: %s", path, why);
        *errnum = rc;
        return NULL;
    }
    pthread_once(&img_once, img_init);
    SDL_RWops *rw = SDL_RWFromFile(path, "rb");
    if (!rw) {
        put_line(err, errlen, "%s: cannot open: %s", path, SDL_GetError());
        *errnum = -EIO;
        return NULL;
    }
    SDL_Surface *raw = IMG_LoadTyped_RW(rw, 1, kind == KIND_PNG ? "PNG" : "JPG");
    if (!raw) {
        const char *e = IMG_GetError();
        /* SDL_image says "unsupported" when its own sniffing finds no image
         * data after the signature we already checked: the file is damaged. */
        if (!e || !*e || strstr(e, "Unsupported"))
            e = "damaged data";
        put_line(err, errlen, "%s: cannot decode the %s image: %s", path,
                 kind == KIND_PNG ? "PNG" : "JPEG", e);
        *errnum = -EINVAL;
        return NULL;
    }
    SDL_Surface *x = SDL_ConvertSurfaceFormat(raw, SDL_PIXELFORMAT_XRGB8888, 0);
    SDL_FreeSurface(raw);
    if (!x) {
        put_line(err, errlen, "%s: cannot convert to RGB: %s", path, SDL_GetError());
        *errnum = -ENOMEM;
        return NULL;
    }
    return x;
}

int cap_image_load(const char *path, coach_frame *out, char *err, size_t errlen)
{
    memset(out, 0, sizeof *out);
    int errnum = -EINVAL;
    SDL_Surface *x = decode(path, err, errlen, &errnum);
    if (!x)
        return errnum;
    size_t row = (size_t)x->w * 4;
    uint8_t *pix = malloc(row * (size_t)x->h);
    if (!pix) {
        put_line(err, errlen, "%s: out of memory for a %dx%d image", path, x->w, x->h);
        SDL_FreeSurface(x);
        return -ENOMEM;
    }
    SDL_LockSurface(x);
    for (int y = 0; y < x->h; y++)
        memcpy(pix + row * (size_t)y, (const uint8_t *)x->pixels + (size_t)x->pitch * (size_t)y, row);
    SDL_UnlockSurface(x);
    out->data = pix;
    out->w = x->w;
    out->h = x->h;
    out->stride = (int)row;
    out->format = COACH_FMT_XRGB8888;
    SDL_FreeSurface(x);
    return 0;
}

void cap_image_free(coach_frame *f)
{
    if (!f)
        return;
    free((void *)f->data);
    memset(f, 0, sizeof *f);
}

/* ---- the source --------------------------------------------------------- */

typedef struct still_file {
    char *path;
    int w, h;     /* playback size (after the whole-factor shrink) */
} still_file;

typedef struct still_source {
    cap_source base;
    still_file *files;
    int nfiles;
    int cur;                /* index of the image in pix, -1 before the first */
    uint8_t *pix;           /* current image, XRGB8888, stride w*4 */
    size_t pix_cap;
    int w, h;
    long frames_left;       /* frames until the next image (folders) */
    long frames_per_still;
    uint64_t seq;
    uint64_t gen;           /* bumped whenever pix changes */
    /* What each mailbox buffer last received: a still is republished at
     * the source rate, and a buffer that already holds it needs no copy
     * (the reader never writes into frames). */
    const cap_mailbox *mb;
    const uint8_t *held[3];
    uint64_t held_gen[3];
} still_source;

static int shrink_factor(int w, int h)
{
    int k = 1;
    while ((w + k - 1) / k > PLAY_W || (h + k - 1) / k > PLAY_H)
        k++;
    return k;
}

/* Decodes file i into s->pix (shrinking when needed).  0 or negative errno
 * with one line in err. */
static int load_into(still_source *s, int i, char *err, size_t errlen)
{
    int errnum = -EINVAL;
    SDL_Surface *x = decode(s->files[i].path, err, errlen, &errnum);
    if (!x)
        return errnum;
    int k = shrink_factor(x->w, x->h);
    int ow = (x->w + k - 1) / k, oh = (x->h + k - 1) / k;
    if ((size_t)ow * (size_t)oh * 4 > s->pix_cap) {
        /* The header promised a smaller image than the decoder gave. */
        put_line(err, errlen, "%s: image is larger than its header says", s->files[i].path);
        SDL_FreeSurface(x);
        return -EINVAL;
    }
    SDL_LockSurface(x);
    const uint8_t *src = x->pixels;
    for (int y = 0; y < oh; y++) {
        uint32_t *dst = (uint32_t *)(s->pix + (size_t)y * (size_t)ow * 4);
        if (k == 1) {
            memcpy(dst, src + (size_t)y * (size_t)x->pitch, (size_t)ow * 4);
            continue;
        }
        for (int xo = 0; xo < ow; xo++) {
            unsigned acc[3] = {0, 0, 0}, n = 0;
            for (int yy = y * k; yy < y * k + k && yy < x->h; yy++) {
                const uint32_t *r = (const uint32_t *)(src + (size_t)yy * (size_t)x->pitch);
                for (int xx = xo * k; xx < xo * k + k && xx < x->w; xx++) {
                    uint32_t p = r[xx];
                    acc[0] += (p >> 16) & 0xFF;
                    acc[1] += (p >> 8) & 0xFF;
                    acc[2] += p & 0xFF;
                    n++;
                }
            }
            dst[xo] = (acc[0] + n / 2) / n << 16 | (acc[1] + n / 2) / n << 8 | (acc[2] + n / 2) / n;
        }
    }
    SDL_UnlockSurface(x);
    SDL_FreeSurface(x);
    s->w = ow;
    s->h = oh;
    s->cur = i;
    s->gen++;
    return 0;
}

/* Moves on to the next image that decodes, after s->cur.  Failures are
 * skipped with a note; 0, or negative errno (first failure in err) when
 * none decodes, in which case the current image stays. */
static int advance(still_source *s, char *err, size_t errlen)
{
    char msg[256];
    int skipped = 0;
    for (int tries = 0; tries < s->nfiles; tries++) {
        int i = (s->cur + 1 + tries) % s->nfiles;
        if (load_into(s, i, msg, sizeof msg) == 0) {
            if (skipped)
                put_line(s->base.note, sizeof s->base.note, "stills: skipped %d unreadable (%s)",
                         skipped, err);
            return 0;
        }
        if (!skipped++)
            put_line(err, errlen, "%s", msg);
    }
    return -EINVAL;
}

static int still_produce(cap_source *src, cap_mailbox *mb, cap_frame *meta)
{
    still_source *s = (still_source *)src;
    if (s->nfiles > 1 && --s->frames_left <= 0) {
        char msg[256];
        if (advance(s, msg, sizeof msg) < 0)
            put_line(src->note, sizeof src->note, "stills: no image can be read any more, "
                     "keeping the last (%s)", msg);
        s->frames_left = s->frames_per_still;
    }
    size_t bytes = (size_t)s->w * (size_t)s->h * 4;
    uint8_t *dst = cap_mailbox_begin(mb, bytes);
    if (!dst) {
        put_line(src->note, sizeof src->note, "%s: a %dx%d image does not fit the frame buffers",
                 src->name, s->w, s->h);
        return -ENOBUFS;
    }
    if (s->mb != mb) {
        memset(s->held, 0, sizeof s->held);
        s->mb = mb;
    }
    int slot = -1;
    for (int k = 0; k < 3 && slot < 0; k++)
        if (s->held[k] == dst)
            slot = k;
    if (slot < 0) {
        slot = (int)(s->seq % 3);
        s->held[slot] = dst;
        s->held_gen[slot] = 0;
    }
    if (s->held_gen[slot] != s->gen) {
        memcpy(dst, s->pix, bytes);
        s->held_gen[slot] = s->gen;
    }
    cap_meta_xrgb(meta, dst, s->w, s->h, s->seq++);
    return 0;
}

static void still_destroy(cap_source *src)
{
    still_source *s = (still_source *)src;
    for (int i = 0; i < s->nfiles; i++)
        free(s->files[i].path);
    free(s->files);
    free(s->pix);
    free(s);
}

static const cap_source_ops still_ops = {
    .poll_fd = NULL, /* paced */
    .produce = still_produce,
    .recover = NULL,
    .destroy = still_destroy,
};

static int by_name(const void *a, const void *b)
{
    /* Natural order, so img2 comes before img10 as people expect. */
    return strverscmp(((const still_file *)a)->path, ((const still_file *)b)->path);
}

static int add_file(still_source *s, int *cap, const char *path, int w, int h)
{
    if (s->nfiles == *cap) {
        int nc = *cap ? *cap * 2 : 16;
        still_file *nf = realloc(s->files, (size_t)nc * sizeof *nf);
        if (!nf)
            return -ENOMEM;
        s->files = nf;
        *cap = nc;
    }
    char *p = strdup(path);
    if (!p)
        return -ENOMEM;
    int k = shrink_factor(w, h);
    s->files[s->nfiles++] = (still_file){p, (w + k - 1) / k, (h + k - 1) / k};
    return 0;
}

/* Lists the folder's PNG/JPEG files.  Files that are not images are counted
 * in *nskip, the first one's line kept in skipline. */
static int scan_folder(still_source *s, const char *dir, int *nskip, char *skipline, size_t skiplen)
{
    DIR *d = opendir(dir);
    if (!d)
        return -errno;
    int cap = 0, rc = 0;
    struct dirent *e;
    char path[4096];
    while ((e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.')
            continue; /* hidden files and . .. */
        if ((size_t)snprintf(path, sizeof path, "%s/%s", dir, e->d_name) >= sizeof path)
            continue;
        struct stat st;
        if (stat(path, &st) != 0 || !S_ISREG(st.st_mode))
            continue;
        int kind, w, h;
        const char *why;
        if (header_size(path, &kind, &w, &h, &why) < 0) {
            if (!(*nskip)++)
                put_line(skipline, skiplen, "%s: %s", e->d_name, why);
            continue;
        }
        rc = add_file(s, &cap, path, w, h);
        if (rc < 0)
            break;
    }
    closedir(d);
    return rc;
}

cap_source *cap_still_open(const char *path, const cap_source_opts *o, char *err, size_t errlen)
{
    still_source *s = calloc(1, sizeof *s);
    if (!s) {
        put_line(err, errlen, "%s: out of memory", path);
        return NULL;
    }
    s->base.ops = &still_ops;
    s->base.fps = o && o->fps > 0 ? o->fps : 30.0;
    s->base.live = 0;
    s->cur = -1;
    struct stat st;
    int is_dir = stat(path, &st) == 0 && S_ISDIR(st.st_mode);
    int nskip = 0;
    char skipline[256] = "";
    if (is_dir) {
        int rc = scan_folder(s, path, &nskip, skipline, sizeof skipline);
        if (rc < 0) {
            put_line(err, errlen, "%s: cannot read the folder: %s", path, strerror(-rc));
            still_destroy(&s->base);
            return NULL;
        }
        if (s->nfiles == 0) {
            put_line(err, errlen, "%s: no PNG or JPEG images in this folder", path);
            still_destroy(&s->base);
            return NULL;
        }
        qsort(s->files, (size_t)s->nfiles, sizeof *s->files, by_name);
    } else {
        int kind, w, h;
        const char *why;
        int rc = header_size(path, &kind, &w, &h, &why);
        if (rc < 0 || add_file(s, &(int){0}, path, w, h) < 0) {
            put_line(err, errlen, "%s: %s", path, rc < 0 ? why : "out of memory");
            still_destroy(&s->base);
            return NULL;
        }
    }
    size_t maxb = 0;
    for (int i = 0; i < s->nfiles; i++) {
        size_t b = (size_t)s->files[i].w * (size_t)s->files[i].h * 4;
        if (b > maxb)
            maxb = b;
    }
    s->pix = malloc(maxb);
    s->pix_cap = maxb;
    s->base.max_bytes = maxb;
    if (!s->pix) {
        put_line(err, errlen, "%s: out of memory for the images", path);
        still_destroy(&s->base);
        return NULL;
    }
    /* Decode the first readable image now so a folder of damaged files fails
     * here, with a line, rather than on the capture thread. */
    char msg[256];
    if (advance(s, msg, sizeof msg) < 0) {
        if (is_dir)
            put_line(err, errlen, "%s: none of its %d images can be read (first: %s)", path,
                     s->nfiles, msg);
        else
            put_line(err, errlen, "%s", msg);
        still_destroy(&s->base);
        return NULL;
    }
    s->frames_per_still = (long)(SECONDS_PER_STILL * s->base.fps + 0.5);
    if (s->frames_per_still < 1)
        s->frames_per_still = 1;
    s->frames_left = s->frames_per_still + 1; /* the first produce() counts too */
    const char *base = strrchr(path, '/');
    base = base && base[1] ? base + 1 : path;
    if (is_dir)
        snprintf(s->base.name, sizeof s->base.name, "stills: %s (%d images)", base, s->nfiles);
    else
        snprintf(s->base.name, sizeof s->base.name, "still: %s", base);
    if (nskip && !s->base.note[0])
        put_line(s->base.note, sizeof s->base.note, "stills: skipped %d file%s that %s not PNG or JPEG (%s)",
                 nskip, nskip > 1 ? "s" : "", nskip > 1 ? "are" : "is", skipline);
    return &s->base;
}
