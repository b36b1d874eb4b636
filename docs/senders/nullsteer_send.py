#!/usr/bin/env python3
"""Reference sender of nullsteer ingest frames (docs/wire-format.md), Python 3 standard library only.

Reads raw interleaved little-endian PCM from standard input and sends it over UDP to HOST:PORT as
it arrives:

    arecord -D hw:2 -c 8 -r 48000 -f S32_LE -t raw | python3 nullsteer_send.py 192.0.2.10:9750 \
        --channels 8 --rate 48000 --encoding int32

Each read's whole sample frames (one instant across all channels) go out at once, in frames of at
most --frame-samples samples per channel; a sample frame is never split across two datagrams (the
bytes of an incomplete one wait for the rest). firstSample is the number of sample frames read
before the frame (+ --start-sample). Nothing is paced unless --pace X is given: then sample k is not
sent before start + k / (rate * X) seconds (for sources faster than real time, e.g. a file).
Exit status: 0 at end of input, 1 on a socket or input error, 2 on a bad command line, 130 on Ctrl-C.
"""
import argparse
import os
import secrets
import socket
import struct
import sys
import time

MAGIC = 0x5246534E  # the bytes "NSFR"
VERSION = 1
HEADER_BYTES = 32
# magic u32, version u8, encoding u8, headerBytes u16, streamId u32, sequence u32, firstSample u64,
# sampleRateHz u32, channels u16, samplesPerChannel u16 -- all little-endian (docs/wire-format.md).
HEADER = struct.Struct("<IBBHIIQIHH")
ENCODINGS = {"int16": (1, 2), "int24": (2, 3), "int32": (3, 4), "float32": (4, 4)}  # code, bytes
MAX_FRAME_BYTES = 65507  # largest IPv4 UDP payload
MTU_FRAME_BYTES = 1472  # crosses a 1500-byte Ethernet MTU unfragmented
READ_BYTES = 1 << 16


def fail_usage(parser, message):
    parser.print_usage(sys.stderr)
    print(f"nullsteer_send.py: {message}", file=sys.stderr)
    sys.exit(2)


def parse_target(text):
    """HOST:PORT or [IPv6]:PORT."""
    if text.startswith("["):
        host, sep, port = text[1:].partition("]:")
    else:
        host, sep, port = text.rpartition(":")
        if ":" in host:
            raise ValueError("an IPv6 address must be in brackets, e.g. [::1]:9750")
    if not sep or not host or not port.isdigit() or not 1 <= int(port) <= 65535:
        raise ValueError(f"{text!r} is not HOST:PORT with port 1-65535")
    return host, int(port)


def int_in(name, lo, hi):
    def convert(text):
        if not text.isdigit() or not lo <= int(text) <= hi:
            raise argparse.ArgumentTypeError(f"{name} {text!r}: allowed an integer {lo}-{hi}")
        return int(text)

    return convert


def positive_float(text):
    try:
        v = float(text)
    except ValueError:
        v = float("nan")
    if not v > 0 or v == float("inf"):
        raise argparse.ArgumentTypeError(f"--pace {text!r}: allowed a number > 0")
    return v


def main():
    parser = argparse.ArgumentParser(description="Send raw PCM from standard input to nullsteer as ingest frames over UDP.")
    parser.add_argument("target", help="HOST:PORT of the server's UDP ingest, e.g. 127.0.0.1:9750")
    parser.add_argument("--channels", type=int_in("--channels", 1, 65535), required=True)
    parser.add_argument("--rate", type=int_in("--rate", 1, 2**32 - 1), required=True, help="samples per second per channel")
    parser.add_argument("--encoding", choices=sorted(ENCODINGS), required=True, help="int16 (S16_LE), int24 (S24_3LE, packed), int32 (S32_LE), float32 (FLOAT_LE)")
    parser.add_argument("--stream-id", type=int_in("--stream-id", 0, 2**32 - 1), help="default: a fresh random id 1-4294967295")
    parser.add_argument("--frame-samples", type=int_in("--frame-samples", 1, 65535), help="samples per channel per frame at most (default: frames of at most 1472 bytes)")
    parser.add_argument("--start-sample", type=int_in("--start-sample", 0, 2**53 - 1), default=0)
    parser.add_argument("--pace", type=positive_float, help="send no faster than this multiple of real time (default: as the input arrives)")
    parser.add_argument("--quiet", action="store_true")
    args = parser.parse_args()

    try:
        host, port = parse_target(args.target)
    except ValueError as e:
        fail_usage(parser, str(e))
    code, sample_bytes = ENCODINGS[args.encoding]
    row = args.channels * sample_bytes
    most = min(65535, (MAX_FRAME_BYTES - HEADER_BYTES) // row)
    if most < 1:
        fail_usage(parser, f"one sample of {args.channels} channels x {args.encoding} does not fit a {MAX_FRAME_BYTES}-byte frame")
    if args.frame_samples is not None:
        if args.frame_samples > most:
            fail_usage(parser, f"--frame-samples {args.frame_samples}: a frame holds at most {most} samples of {args.channels}-channel {args.encoding}")
        n = args.frame_samples
    else:
        n = max(1, min(most, (MTU_FRAME_BYTES - HEADER_BYTES) // row))
    stream_id = args.stream_id if args.stream_id is not None else 1 + secrets.randbelow(2**32 - 1)

    try:
        family, kind, proto, _, address = socket.getaddrinfo(host, port, type=socket.SOCK_DGRAM)[0]
        sock = socket.socket(family, kind, proto)
    except OSError as e:
        print(f"nullsteer_send.py: cannot resolve {host}: {e}", file=sys.stderr)
        return 1
    shown = f"[{address[0]}]:{address[1]}" if family == socket.AF_INET6 else f"{address[0]}:{address[1]}"
    if not args.quiet:
        print(f"sending standard input ({args.channels} ch, {args.encoding}, {args.rate} Hz) as stream {stream_id} to udp://{shown}, {n} samples per frame", file=sys.stderr)

    stdin = sys.stdin.buffer
    buf = bytearray()  # unsent bytes: whole sample frames being sent, then at most one partial one
    frames = 0
    sent = 0  # sample frames sent
    t0 = time.monotonic()
    try:
        while True:
            data = stdin.read1(READ_BYTES) if hasattr(stdin, "read1") else os.read(0, READ_BYTES)
            if not data:
                break
            buf += data
            whole = len(buf) // row
            view = memoryview(buf)
            done = 0
            while done < whole:
                count = min(n, whole - done)
                if args.start_sample + sent > 2**53 - 1:
                    print(f"nullsteer_send.py: firstSample would pass 2^53 - 1 (docs/wire-format.md) after {sent} samples", file=sys.stderr)
                    return 1
                if args.pace:
                    wait = t0 + sent / (args.rate * args.pace) - time.monotonic()
                    if wait > 0:
                        time.sleep(wait)
                header = HEADER.pack(MAGIC, VERSION, code, HEADER_BYTES, stream_id, frames % 2**32, args.start_sample + sent, args.rate, args.channels, count)
                sock.sendmsg([header, view[done * row : (done + count) * row]], [], 0, address)
                frames += 1
                sent += count
                done += count
            view.release()
            del buf[: whole * row]
    except KeyboardInterrupt:
        print(f"stopped after {frames} frames, {sent} samples per channel", file=sys.stderr)
        return 130
    except OSError as e:
        print(f"nullsteer_send.py: {e}", file=sys.stderr)
        return 1
    finally:
        sock.close()
    if buf:
        print(f"warning: the input ended inside a sample frame: {len(buf)} bytes of an incomplete {row}-byte sample frame not sent", file=sys.stderr)
    if not args.quiet:
        print(f"sent {frames} frames, {sent} samples per channel ({sent / args.rate:.3f} s at {args.rate} Hz, {sent * row} bytes) as stream {stream_id} to udp://{shown}; {len(buf)} bytes of a partial sample frame discarded", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
