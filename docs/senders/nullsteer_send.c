/*
 * Reference sender of nullsteer ingest frames (docs/wire-format.md): C99, POSIX sockets, libc only.
 *
 *   cc -O2 -o nullsteer_send nullsteer_send.c
 *   arecord -D hw:2 -c 8 -r 48000 -f S32_LE -t raw | ./nullsteer_send 192.0.2.10:9750 \
 *       --channels 8 --rate 48000 --encoding int32
 *
 * Reads raw interleaved little-endian PCM from standard input and sends it over UDP to HOST:PORT as
 * it arrives. Each read's whole sample frames (one instant across all channels) go out at once, in
 * frames of at most --frame-samples samples per channel; a sample frame is never split across two
 * datagrams (the bytes of an incomplete one wait for the rest). firstSample is the number of sample
 * frames read before the frame (+ --start-sample). Nothing is paced unless --pace X is given: then
 * sample k is not sent before start + k / (rate * X) seconds.
 *
 * The payload is the input's bytes unchanged (the wire payload is little-endian like the input);
 * the header is written byte by byte, so the sender is right on any host byte order.
 * Exit status: 0 at end of input, 1 on a socket or input error, 2 on a bad command line, 130 on SIGINT.
 */
#define _POSIX_C_SOURCE 200809L

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <netdb.h>
#include <signal.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <sys/types.h>
#include <sys/uio.h>
#include <time.h>
#include <unistd.h>

#define MAGIC 0x5246534Eu /* the bytes "NSFR" */
#define VERSION 1
#define HEADER_BYTES 32
#define MAX_FRAME_BYTES 65507 /* largest IPv4 UDP payload */
#define MTU_FRAME_BYTES 1472  /* crosses a 1500-byte Ethernet MTU unfragmented */
#define READ_BYTES 65536

static const char *usage =
    "usage: nullsteer_send HOST:PORT --channels M --rate HZ --encoding int16|int24|int32|float32\n"
    "                      [--stream-id N] [--frame-samples N] [--start-sample N] [--pace X] [--quiet]\n";

static volatile sig_atomic_t interrupted = 0;

static void on_sigint(int sig) {
    (void)sig;
    interrupted = 1;
}

static int bad_usage(const char *fmt, const char *arg) {
    fputs("nullsteer_send: ", stderr);
    fprintf(stderr, fmt, arg);
    fputc('\n', stderr);
    fputs(usage, stderr);
    return 2;
}

/* A decimal integer in [lo, hi]: digits only, no sign. */
static int parse_uint(const char *text, unsigned long long lo, unsigned long long hi, unsigned long long *out) {
    char *end;
    unsigned long long v;
    if (text == NULL || *text < '0' || *text > '9') return 0;
    errno = 0;
    v = strtoull(text, &end, 10);
    if (errno != 0 || *end != '\0' || v < lo || v > hi) return 0;
    *out = v;
    return 1;
}

static void put_u16(unsigned char *p, unsigned v) {
    p[0] = (unsigned char)(v & 0xff);
    p[1] = (unsigned char)((v >> 8) & 0xff);
}

static void put_u32(unsigned char *p, uint32_t v) {
    int i;
    for (i = 0; i < 4; i++) p[i] = (unsigned char)((v >> (8 * i)) & 0xff);
}

static void put_u64(unsigned char *p, uint64_t v) {
    int i;
    for (i = 0; i < 8; i++) p[i] = (unsigned char)((v >> (8 * i)) & 0xff);
}

/* A random stream id in 1..2^32-1 from /dev/urandom; from the clock and pid where it is missing. */
static uint32_t random_stream_id(void) {
    uint32_t id = 0;
    int fd = open("/dev/urandom", O_RDONLY);
    if (fd >= 0) {
        unsigned char b[4];
        if (read(fd, b, 4) == 4) id = (uint32_t)b[0] | (uint32_t)b[1] << 8 | (uint32_t)b[2] << 16 | (uint32_t)b[3] << 24;
        close(fd);
    }
    if (id == 0) {
        struct timespec ts;
        clock_gettime(CLOCK_REALTIME, &ts);
        id = (uint32_t)ts.tv_nsec ^ (uint32_t)ts.tv_sec ^ ((uint32_t)getpid() << 16);
    }
    return id == 0 ? 1 : id;
}

static double now_s(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

static void sleep_s(double s) {
    struct timespec ts;
    ts.tv_sec = (time_t)s;
    ts.tv_nsec = (long)((s - (double)ts.tv_sec) * 1e9);
    while (nanosleep(&ts, &ts) != 0 && errno == EINTR && !interrupted) {
    }
}

int main(int argc, char **argv) {
    const char *target = NULL, *encoding = NULL;
    unsigned long long channels = 0, rate = 0, stream_id = 0, frame_samples = 0, start_sample = 0, v;
    int have_stream_id = 0, quiet = 0;
    double pace = 0;
    unsigned code = 0, sample_bytes = 0;
    int i;

    for (i = 1; i < argc; i++) {
        const char *a = argv[i];
        const char *val = i + 1 < argc ? argv[i + 1] : NULL;
        if (strcmp(a, "--quiet") == 0) {
            quiet = 1;
            continue;
        }
        if (strcmp(a, "-h") == 0 || strcmp(a, "--help") == 0) {
            fputs(usage, stdout);
            return 0;
        }
        if (strncmp(a, "--", 2) != 0) {
            if (target != NULL) return bad_usage("one HOST:PORT expected, got another: %s", a);
            target = a;
            continue;
        }
        if (val == NULL) return bad_usage("%s needs a value", a);
        i++;
        if (strcmp(a, "--channels") == 0) {
            if (!parse_uint(val, 1, 65535, &channels)) return bad_usage("--channels %s: allowed an integer 1-65535", val);
        } else if (strcmp(a, "--rate") == 0) {
            if (!parse_uint(val, 1, 4294967295ull, &rate)) return bad_usage("--rate %s: allowed an integer 1-4294967295", val);
        } else if (strcmp(a, "--encoding") == 0) {
            encoding = val;
            if (strcmp(val, "int16") == 0) code = 1, sample_bytes = 2;
            else if (strcmp(val, "int24") == 0) code = 2, sample_bytes = 3;
            else if (strcmp(val, "int32") == 0) code = 3, sample_bytes = 4;
            else if (strcmp(val, "float32") == 0) code = 4, sample_bytes = 4;
            else return bad_usage("--encoding %s: allowed int16, int24, int32, float32", val);
        } else if (strcmp(a, "--stream-id") == 0) {
            if (!parse_uint(val, 0, 4294967295ull, &stream_id)) return bad_usage("--stream-id %s: allowed an integer 0-4294967295", val);
            have_stream_id = 1;
        } else if (strcmp(a, "--frame-samples") == 0) {
            if (!parse_uint(val, 1, 65535, &frame_samples)) return bad_usage("--frame-samples %s: allowed an integer 1-65535", val);
        } else if (strcmp(a, "--start-sample") == 0) {
            if (!parse_uint(val, 0, 9007199254740991ull, &start_sample)) return bad_usage("--start-sample %s: allowed an integer 0-9007199254740991", val);
        } else if (strcmp(a, "--pace") == 0) {
            char *end;
            pace = strtod(val, &end);
            if (*end != '\0' || !(pace > 0) || !isfinite(pace)) return bad_usage("--pace %s: allowed a number > 0", val);
        } else {
            return bad_usage("unknown option %s", a);
        }
    }
    if (target == NULL) return bad_usage("%s", "HOST:PORT is missing");
    if (channels == 0) return bad_usage("%s", "--channels is missing");
    if (rate == 0) return bad_usage("%s", "--rate is missing");
    if (encoding == NULL) return bad_usage("%s", "--encoding is missing");

    /* HOST:PORT or [IPv6]:PORT */
    char host[256];
    const char *port_text;
    if (target[0] == '[') {
        const char *close_bracket = strchr(target, ']');
        size_t len = close_bracket ? (size_t)(close_bracket - target - 1) : 0;
        if (close_bracket == NULL || close_bracket[1] != ':' || len == 0 || len >= sizeof host) return bad_usage("%s: not [IPv6]:PORT", target);
        memcpy(host, target + 1, len);
        host[len] = '\0';
        port_text = close_bracket + 2;
    } else {
        const char *colon = strrchr(target, ':');
        size_t len = colon ? (size_t)(colon - target) : 0;
        if (colon == NULL || len == 0 || len >= sizeof host || memchr(target, ':', len) != NULL) return bad_usage("%s: not HOST:PORT (an IPv6 address goes in brackets)", target);
        memcpy(host, target, len);
        host[len] = '\0';
        port_text = colon + 1;
    }
    if (!parse_uint(port_text, 1, 65535, &v)) return bad_usage("%s: the port must be an integer 1-65535", target);

    size_t row = (size_t)channels * sample_bytes;
    size_t most = (MAX_FRAME_BYTES - HEADER_BYTES) / row;
    if (most > 65535) most = 65535;
    if (most < 1) {
        fprintf(stderr, "nullsteer_send: one sample of %llu channels x %s does not fit a 65507-byte frame\n%s", channels, encoding, usage);
        return 2;
    }
    size_t n;
    if (frame_samples != 0) {
        if (frame_samples > most) {
            fprintf(stderr, "nullsteer_send: --frame-samples %llu: a frame of %llu-channel %s holds at most %lu samples (65507-byte limit)\n%s", frame_samples, channels, encoding,
                    (unsigned long)most, usage);
            return 2;
        }
        n = (size_t)frame_samples;
    } else {
        n = (MTU_FRAME_BYTES - HEADER_BYTES) / row;
        if (n < 1) n = 1;
        if (n > most) n = most;
    }
    uint32_t id = have_stream_id ? (uint32_t)stream_id : random_stream_id();

    struct addrinfo hints, *ai;
    memset(&hints, 0, sizeof hints);
    hints.ai_family = AF_UNSPEC;
    hints.ai_socktype = SOCK_DGRAM;
    int gai = getaddrinfo(host, port_text, &hints, &ai);
    if (gai != 0) {
        fprintf(stderr, "nullsteer_send: cannot resolve %s: %s\n", host, gai_strerror(gai));
        return 1;
    }
    int sock = socket(ai->ai_family, ai->ai_socktype, ai->ai_protocol);
    if (sock < 0) {
        perror("nullsteer_send: socket");
        freeaddrinfo(ai);
        return 1;
    }
    if (!quiet) {
        fprintf(stderr, "sending standard input (%llu ch, %s, %llu Hz) as stream %lu to udp://%s, %lu samples per frame\n", channels, encoding, rate, (unsigned long)id, target,
                (unsigned long)n);
    }

    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_sigint;
    sigaction(SIGINT, &sa, NULL); /* no SA_RESTART: a blocked read returns EINTR */

    /* buf holds the unsent input: whole sample frames, then at most one partial one. */
    size_t cap = READ_BYTES + row;
    unsigned char *buf = malloc(cap);
    if (buf == NULL) {
        fputs("nullsteer_send: out of memory\n", stderr);
        return 1;
    }
    unsigned char header[HEADER_BYTES];
    put_u32(header, MAGIC);
    header[4] = VERSION;
    header[5] = (unsigned char)code;
    put_u16(header + 6, HEADER_BYTES);
    put_u32(header + 8, id);
    put_u32(header + 24, (uint32_t)rate);
    put_u16(header + 28, (unsigned)channels);

    size_t have = 0;
    unsigned long long frames = 0, sent = 0;
    int status = 0;
    double t0 = now_s();
    for (;;) {
        ssize_t got = read(0, buf + have, cap - have);
        if (got < 0) {
            if (errno == EINTR && !interrupted) continue;
            if (!interrupted) {
                perror("nullsteer_send: read");
                status = 1;
            }
            break;
        }
        if (got == 0) break;
        have += (size_t)got;
        size_t whole = have / row, done = 0;
        while (done < whole && !interrupted) {
            size_t count = whole - done < n ? whole - done : n;
            if (start_sample + sent > 9007199254740991ull) {
                fprintf(stderr, "nullsteer_send: firstSample would pass 2^53 - 1 (docs/wire-format.md) after %llu samples\n", sent);
                status = 1;
                break;
            }
            if (pace > 0) {
                double wait = t0 + (double)sent / ((double)rate * pace) - now_s();
                if (wait > 0) sleep_s(wait);
            }
            put_u32(header + 12, (uint32_t)frames);
            put_u64(header + 16, start_sample + sent);
            put_u16(header + 30, (unsigned)count);
            struct iovec iov[2];
            iov[0].iov_base = header;
            iov[0].iov_len = HEADER_BYTES;
            iov[1].iov_base = buf + done * row;
            iov[1].iov_len = count * row;
            struct msghdr msg;
            memset(&msg, 0, sizeof msg);
            msg.msg_name = ai->ai_addr;
            msg.msg_namelen = ai->ai_addrlen;
            msg.msg_iov = iov;
            msg.msg_iovlen = 2;
            if (sendmsg(sock, &msg, 0) < 0) {
                if (errno == EINTR) continue; /* interrupted before sending: try again (or stop) */
                perror("nullsteer_send: sendmsg");
                status = 1;
                break;
            }
            frames++;
            sent += count;
            done += count;
        }
        if (status != 0 || interrupted) break;
        /* Keep the partial sample frame (fewer than row bytes) at the front. */
        memmove(buf, buf + whole * row, have - whole * row);
        have -= whole * row;
    }
    close(sock);
    freeaddrinfo(ai);
    free(buf);
    if (interrupted) {
        fprintf(stderr, "stopped after %llu frames, %llu samples per channel\n", frames, sent);
        return 130;
    }
    if (status != 0) return status;
    if (have > 0) fprintf(stderr, "warning: the input ended inside a sample frame: %lu bytes of an incomplete %lu-byte sample frame not sent\n", (unsigned long)have, (unsigned long)row);
    if (!quiet) {
        fprintf(stderr, "sent %llu frames, %llu samples per channel (%.3f s at %llu Hz, %llu bytes) as stream %lu to udp://%s; %lu bytes of a partial sample frame discarded\n", frames, sent,
                (double)sent / (double)rate, rate, sent * (unsigned long long)row, (unsigned long)id, target, (unsigned long)have);
    }
    return 0;
}
