/*
 * Replay a run directory through the slotwise C interface, as a C firmware would drive it: raw
 * TDC words in blocks, the classical channel's bytes in and out, output records drained.
 *
 * Reads, in the current directory (a run directory of `hil-host station`):
 *   profile.swblob       the profile blob (slotwise profile compile), with the hint
 *   words.bin         raw TDC records in the blob's word layout
 *   answers-link.bin  the transmitter's answers frames, each after the u32 LE index of the
 *                     announce frame it answers
 *   auth.bin          (optional) the classical channel's key: 16-byte hash key, u32 LE announce
 *                     frames per round, then the pre-shared pad words; when present the station
 *                     is authenticated before the first block
 *   refill-link.bin   (with auth.bin) key-refill records, each after the u32 LE index of the pump
 *                     (counted from 0) that pushes them
 * Writes frames-c.bin (records for the post-processing host) and announce-c.bin (announce frames
 * sent), and prints one line of counters. Exit status 0 when every detection is accounted for and
 * nothing was dropped, 1 otherwise.
 *
 * The schedule (hil/host-runner/src/station.rs follows the same one, so the bytes compare):
 * push CHUNK_BYTES of words; pump: drain the announce bytes (frames counted by their 0x00
 * delimiters), push the answers released by the lag rule as far as the station takes them, drain
 * the output records. At the end: end_input, pump, finish, pump. Authenticated, each pump first
 * pushes the refill records due, and finish answers SW_AGAIN once: pump and finish again.
 *
 * Builds with the host's C compiler (linked with the host library) and with arm-none-eabi-gcc
 * for a Cortex-M4F (newlib, semihosting file I/O; see mps2/).
 */
#include <stdio.h>
#include <string.h>

#include "slotwise.h"

#define CHUNK_BYTES 4096
#define ANSWER_LAG_FRAMES 2u
#define MAX_ANSWER_FRAME 4096

static SwStorage storage;
static uint8_t chunk[CHUNK_BYTES];
static uint8_t buf[1024];

/* The answers stream: one record held at a time (index, frame through its 0x00). */
struct answers {
    FILE *f;
    int held;
    uint32_t index;
    uint8_t frame[MAX_ANSWER_FRAME];
    size_t len;
    size_t pushed;
};

struct pump {
    SwStation *st;
    struct answers ans;
    struct answers refills; /* index = the pump that pushes the record */
    uint32_t pumps;
    FILE *announce;
    FILE *frames;
    uint32_t written;
    int ended;
    int failed;
};

/* Read the next record into `a`; 0 at the end of the stream, -1 on a damaged record. */
static int next_record(struct answers *a) {
    uint8_t h[4];
    size_t n = fread(h, 1, 4, a->f);
    if (n == 0) return 0;
    if (n != 4) return -1;
    a->index = (uint32_t)h[0] | ((uint32_t)h[1] << 8) | ((uint32_t)h[2] << 16) | ((uint32_t)h[3] << 24);
    a->len = 0;
    for (;;) {
        int c = fgetc(a->f);
        if (c == EOF || a->len == MAX_ANSWER_FRAME) return -1;
        a->frame[a->len++] = (uint8_t)c;
        if (c == 0) break;
    }
    a->pushed = 0;
    a->held = 1;
    return 1;
}

static void pump(struct pump *p) {
    size_t n;
    uint32_t at = p->pumps++;
    while (p->refills.f) {
        if (!p->refills.held) {
            int r = next_record(&p->refills);
            if (r < 0) { fprintf(stderr, "refill-link.bin: damaged record\n"); p->failed = 1; }
            if (r <= 0) break;
        }
        if (p->refills.index > at) break;
        if (sw_station_push_refill(p->st, p->refills.frame, p->refills.len) < 0) p->failed = 1;
        p->refills.held = 0;
    }
    while ((n = sw_station_drain_link(p->st, buf, sizeof buf)) > 0) {
        if (fwrite(buf, 1, n, p->announce) != n) p->failed = 1;
        for (size_t i = 0; i < n; i++) p->written += buf[i] == 0;
    }
    for (;;) {
        if (!p->ans.held) {
            int r = next_record(&p->ans);
            if (r < 0) { fprintf(stderr, "answers-link.bin: damaged record\n"); p->failed = 1; }
            if (r <= 0) break;
        }
        int released = p->written > p->ans.index &&
                       (p->ended || p->written - p->ans.index > ANSWER_LAG_FRAMES);
        if (!released) break;
        p->ans.pushed += sw_station_push_link(p->st, p->ans.frame + p->ans.pushed,
                                              p->ans.len - p->ans.pushed);
        if (p->ans.pushed < p->ans.len) break;
        p->ans.held = 0;
    }
    while ((n = sw_station_drain_frames(p->st, buf, sizeof buf)) > 0)
        if (fwrite(buf, 1, n, p->frames) != n) p->failed = 1;
}

/* Authenticate the station from auth.bin when the run directory has one; -1 on a failure. */
static int authenticate(struct pump *p) {
    static uint8_t key[16 + 4 + 8 * SW_AUTH_KEY_WORDS];
    FILE *f = fopen("auth.bin", "rb");
    if (!f) return 0;
    size_t n = fread(key, 1, sizeof key, f);
    fclose(f);
    if (n < 20) { fprintf(stderr, "auth.bin: too short\n"); return -1; }
    uint32_t frames = (uint32_t)key[16] | ((uint32_t)key[17] << 8) | ((uint32_t)key[18] << 16) |
                      ((uint32_t)key[19] << 24);
    int rc = sw_station_authenticate(p->st, key, key + 20, n - 20, frames);
    memset(key, 0, sizeof key);
    if (rc != SW_OK) { fprintf(stderr, "auth.bin: refused (%d)\n", rc); return -1; }
    p->refills.f = fopen("refill-link.bin", "rb");
    return 1;
}

static FILE *open_or_say(const char *name, const char *mode) {
    FILE *f = fopen(name, mode);
    if (!f) fprintf(stderr, "%s: cannot open\n", name);
    return f;
}

int main(void) {
    static uint8_t profile[1024];
    char msg[160];
    FILE *pf = open_or_say("profile.swblob", "rb");
    if (!pf) return 1;
    size_t plen = fread(profile, 1, sizeof profile, pf);
    fclose(pf);
    if (sw_profile_check(profile, plen, msg, sizeof msg) != SW_OK) {
        fprintf(stderr, "profile.swblob: %s\n", msg);
        return 1;
    }
    struct pump p = {0};
    if (sw_station_init(&storage, profile, plen, &p.st) != SW_OK) return 1;
    if (authenticate(&p) < 0) return 1;
    FILE *words = open_or_say("words.bin", "rb");
    p.ans.f = open_or_say("answers-link.bin", "rb");
    p.announce = open_or_say("announce-c.bin", "wb");
    p.frames = open_or_say("frames-c.bin", "wb");
    if (!words || !p.ans.f || !p.announce || !p.frames) return 1;

    size_t n;
    while ((n = fread(chunk, 1, sizeof chunk, words)) > 0) {
        if (sw_station_push_words(p.st, chunk, n) != SW_OK) p.failed = 1;
        pump(&p);
    }
    if (sw_station_end_input(p.st) != SW_OK) p.failed = 1;
    p.ended = 1;
    pump(&p);
    int fin = sw_station_finish(p.st);
    pump(&p);
    if (fin == SW_AGAIN) {
        fin = sw_station_finish(p.st);
        pump(&p);
    }
    if (fin != SW_OK) p.failed = 1;
    fclose(words);
    if (p.refills.f) fclose(p.refills.f);
    fclose(p.ans.f);
    fclose(p.announce);
    fclose(p.frames);

    SwCounters c;
    sw_station_counters(p.st, &c);
    uint64_t sum = 0;
    for (size_t i = 0; i < SW_FATES; i++) sum += c.fates[i];
    printf("c-replay: station %u bytes, detections %llu, sifted %llu, accounted %llu, frames out "
           "%llu, dropped %llu, announce frames %llu, answers frames %llu, malformed words %llu, "
           "rollover gaps %llu, locked %u, aligned %u, alarms 0x%02x, rounds kept %llu, "
           "discarded %llu\n",
           (unsigned)sw_station_size(), (unsigned long long)c.detections,
           (unsigned long long)c.sifted_bits, (unsigned long long)sum,
           (unsigned long long)c.frames_out, (unsigned long long)c.frames_dropped,
           (unsigned long long)c.announce_frames, (unsigned long long)c.answers_frames,
           (unsigned long long)c.malformed_words, (unsigned long long)c.rollover_gaps,
           (unsigned)c.locked, (unsigned)c.aligned, (unsigned)sw_station_alarms(p.st),
           (unsigned long long)c.rounds_kept, (unsigned long long)c.rounds_discarded);
    if (sum != c.detections || c.frames_dropped != 0 || c.link_in_refused_bytes != 0) p.failed = 1;
    return p.failed ? 1 : 0;
}
