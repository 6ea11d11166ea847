/* Latest-frame mailbox between the capture thread and the UI thread.
 *
 * Threads: exactly one producer (the capture thread) and one consumer (the
 * UI thread).  No queue: the mailbox holds at most one unread frame.
 * Buffers: three fixed buffers, so at any moment one can be the reader's,
 * one the pending (published, unread) frame and one the producer's.  The
 * producer therefore never waits for the reader and never touches a buffer
 * the reader holds or the pending frame it may take next.
 * Ordering: one mutex guards the indices and the counters; it is held only
 * to move indices, never while pixels are written or read.
 * Drop policy: newest wins.  Publishing while a frame is still unread
 * replaces it and counts one drop, so a slow UI always sees the freshest
 * frame and the capture side never blocks.
 */
#include <errno.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include "capture/capture.h"

#define NBUF 3

struct cap_mailbox {
    pthread_mutex_t mu;
    uint8_t *buf[NBUF];
    size_t cap;
    int writing;  /* buffer the producer holds, -1 when none */
    int pending;  /* published and not yet taken, -1 when none */
    int reading;  /* buffer the consumer holds, -1 when none */
    cap_frame meta[NBUF];
    cap_stats st;
};

cap_mailbox *cap_mailbox_create(size_t max_bytes)
{
    if (max_bytes == 0)
        return NULL;
    cap_mailbox *m = calloc(1, sizeof *m);
    if (!m)
        return NULL;
    if (pthread_mutex_init(&m->mu, NULL) != 0) {
        free(m);
        return NULL;
    }
    m->cap = max_bytes;
    m->writing = m->pending = m->reading = -1;
    for (int i = 0; i < NBUF; i++) {
        /* 64-byte alignment keeps rows friendly to vector loads in the analysis. */
        size_t sz = (max_bytes + 63) & ~(size_t)63;
        m->buf[i] = aligned_alloc(64, sz);
        if (!m->buf[i]) {
            cap_mailbox_destroy(m);
            return NULL;
        }
    }
    return m;
}

void cap_mailbox_destroy(cap_mailbox *m)
{
    if (!m)
        return;
    for (int i = 0; i < NBUF; i++)
        free(m->buf[i]);
    pthread_mutex_destroy(&m->mu);
    free(m);
}

uint8_t *cap_mailbox_begin(cap_mailbox *m, size_t bytes)
{
    if (!m || bytes > m->cap)
        return NULL;
    pthread_mutex_lock(&m->mu);
    int idx = -1;
    for (int i = 0; i < NBUF; i++) {
        if (i != m->pending && i != m->reading) {
            idx = i;
            break;
        }
    }
    m->writing = idx; /* with three buffers one is always free */
    pthread_mutex_unlock(&m->mu);
    return m->buf[idx];
}

void cap_mailbox_publish(cap_mailbox *m, const cap_frame *meta)
{
    if (!m)
        return;
    pthread_mutex_lock(&m->mu);
    if (m->writing >= 0) {
        if (m->pending >= 0)
            m->st.dropped++;
        m->pending = m->writing;
        m->writing = -1;
        m->meta[m->pending] = *meta;
        if (!m->meta[m->pending].view.data)
            m->meta[m->pending].view.data = m->buf[m->pending];
        m->st.published++;
    }
    pthread_mutex_unlock(&m->mu);
}

int cap_mailbox_take(cap_mailbox *m, cap_frame *out)
{
    if (!m)
        return -EINVAL;
    pthread_mutex_lock(&m->mu);
    if (m->pending < 0) {
        pthread_mutex_unlock(&m->mu);
        return -EAGAIN;
    }
    /* Taking again without a release gives the old frame back implicitly. */
    m->reading = m->pending;
    m->pending = -1;
    m->st.taken++;
    *out = m->meta[m->reading];
    pthread_mutex_unlock(&m->mu);
    return 0;
}

void cap_mailbox_release(cap_mailbox *m)
{
    if (!m)
        return;
    pthread_mutex_lock(&m->mu);
    m->reading = -1;
    pthread_mutex_unlock(&m->mu);
}

void cap_mailbox_stats(cap_mailbox *m, cap_stats *out)
{
    if (!m) {
        memset(out, 0, sizeof *out);
        return;
    }
    pthread_mutex_lock(&m->mu);
    *out = m->st;
    pthread_mutex_unlock(&m->mu);
}
