/**
 * The configuration schema: every field, its type, range and meaning, defined once. The loader
 * validates against it, README's config reference is checked against it by a test, and `--set`
 * uses it to parse command-line strings.
 */

import { PROCESSING_LIMITS } from '../../shared/processing-fields.ts';

export type FieldSpec =
  | { kind: 'int'; min: number; max: number; doc: string; nullable?: boolean }
  | { kind: 'number'; min: number; max: number; doc: string; nullable?: boolean }
  | { kind: 'string'; doc: string; pattern?: RegExp; patternDoc?: string; maxLength?: number; nullable?: boolean }
  | { kind: 'enum'; values: readonly string[]; doc: string }
  | { kind: 'enumList'; values: readonly string[]; doc: string; minItems: number }
  | { kind: 'stringList'; pattern: RegExp; patternDoc: string; maxItems: number; maxLength: number; doc: string }
  | { kind: 'bool'; doc: string }
  /** A list of small records, each with the same closed set of leaf fields (all required but those named in `optional`). */
  | { kind: 'recordList'; fields: Record<string, LeafSpec>; maxItems: number; doc: string; optional?: readonly string[] }
  | { kind: 'object'; fields: Record<string, FieldSpec>; doc?: string };

/** A field that is not an object or a list of records. */
export type LeafSpec = Exclude<FieldSpec, { kind: 'object' } | { kind: 'recordList' }>;

const ENCODINGS = ['int16', 'int24', 'int32', 'float32'] as const;

// The processing ranges are the panel's and the live checks' too (shared/processing-fields.ts).
const PL = PROCESSING_LIMITS;

// Retention limits (server/monitor/retention.ts): oldest files deleted first, each deletion journaled.
const RETENTION_FIELDS = (what: string): Record<string, FieldSpec> => ({
  maxAgeDays: { kind: 'number', nullable: true, min: 0.01, max: 36500, doc: `Delete ${what} older than this many days (checked at start and every minute); null = no age limit.` },
  maxBytes: { kind: 'int', nullable: true, min: 0, max: 1125899906842624, doc: `Most bytes ${what} may take together; beyond it the oldest are deleted first; null = no size limit.` },
});

export const CONFIG_SCHEMA: FieldSpec = {
  kind: 'object',
  fields: {
    server: {
      kind: 'object',
      fields: {
        host: { kind: 'string', maxLength: 255, pattern: /^[A-Za-z0-9.:\-[\]]+$/, patternDoc: 'a host name or IP address', doc: 'Address the HTTP, WebSocket and UDP listeners bind to. Loopback by default.' },
        httpPort: { kind: 'int', min: 0, max: 65535, doc: 'HTTP/WebSocket port; 0 picks a free port (printed at start).' },
        token: { kind: 'string', nullable: true, maxLength: 256, pattern: /^[\x21-\x7e]{16,}$/, patternDoc: 'at least 16 printable ASCII characters, no spaces', doc: 'Access token for changing anything; required when host is not loopback.' },
        allowedHosts: { kind: 'stringList', maxItems: 64, maxLength: 255, pattern: /^(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+)$/, patternDoc: 'host names or IP addresses, without port', doc: 'Host names the server answers to besides its bound address and the loopback names (localhost, 127.0.0.1, [::1]); requests and upgrades with another `Host` are refused 403 (DNS rebinding). Bound to 0.0.0.0 or ::, the machine\'s interface addresses count as bound.' },
        allowedOrigins: { kind: 'stringList', maxItems: 64, maxLength: 300, pattern: /^https?:\/\/(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+)(:\d{1,5})?$/, patternDoc: 'origins such as http://host:port', doc: 'Web origins besides the server\'s own whose pages may make changes and open WebSockets; other origins are refused 403. Requests without an Origin header (command-line clients) are not affected.' },
      },
    },
    access: {
      kind: 'object',
      fields: {
        openStatus: { kind: 'bool', doc: 'With server.token set: true = read-only GETs under /api and GET /metrics stay open; false = they need the token too (the dashboard page and /assets stay open).' },
        controlRatePerS: { kind: 'number', min: 0, max: 100000, doc: 'Mutating REST requests per second allowed per client IP (token bucket); more get 429 with Retry-After. 0 = no limit.' },
        controlBurst: { kind: 'int', min: 1, max: 100000, doc: 'Mutating REST requests a client IP may send at once before the rate applies (bucket size).' },
        authFailureRatePerS: { kind: 'number', min: 0.001, max: 1000, doc: 'Failed authentications (missing or wrong token, REST and WebSocket upgrades together) per second allowed per client IP after the burst; beyond it they get 429 with Retry-After. A request with the right token is never held back.' },
        authFailureBurst: { kind: 'int', min: 1, max: 100000, doc: 'Failed authentications a client IP may make at once before authFailureRatePerS applies.' },
      },
    },
    source: {
      kind: 'object',
      fields: {
        kind: { kind: 'enum', values: ['simulator', 'network', 'capture'], doc: '`simulator`: the built-in scenario; `network`: frames over UDP and WebSocket, and RTP sessions (ingest.rtp.sessions); `capture`: the PCM a local command (capture.command) writes to its standard output.' },
      },
    },
    capture: {
      kind: 'object',
      fields: {
        command: { kind: 'stringList', maxItems: 64, maxLength: 4096, pattern: /^[^\0]+$/, patternDoc: 'an argv list (program, then its arguments; no shell)', doc: 'The capture command for `source.kind` capture, e.g. ["arecord","-D","hw:2","-c","16","-r","48000","-f","S32_LE","-t","raw"]. Run without a shell; its standard output is raw interleaved PCM. On the command line: --set capture.command=\'["arecord","-c","16"]\' (a JSON list).' },
        channels: { kind: 'int', min: 1, max: 1024, doc: 'Channels in the capture command\'s output (interleaved). The array file\'s `inputs` may map them to positions; without it they must equal the array\'s positions.' },
        encoding: { kind: 'enum', values: ENCODINGS, doc: 'Sample format of the capture output, little-endian: int16 (S16_LE), int24 (packed 3 bytes, S24_3LE), int32 (S32_LE), float32 (FLOAT_LE).' },
        sampleRateHz: { kind: 'int', min: 8000, max: 384000, nullable: true, doc: 'Sample rate of the capture output; null = input.sampleRateHz. Must equal input.sampleRateHz.' },
        restartMinMs: { kind: 'int', min: 10, max: 60000, doc: 'First wait before the capture command is started again after it exits; doubled after each exit that follows a short run, up to capture.restartMaxMs.' },
        restartMaxMs: { kind: 'int', min: 10, max: 600000, doc: 'Longest wait between restarts of the capture command.' },
        queueMs: { kind: 'int', min: 10, max: 60000, doc: 'Captured audio waiting for the server\'s thread at most, milliseconds; beyond it the oldest is dropped and counted (the capture command is never blocked).' },
      },
    },
    array: {
      kind: 'object',
      fields: {
        file: { kind: 'string', maxLength: 4096, doc: 'Array geometry JSON (`positions` in metres). Relative paths: working directory first, then the project\'s config/ folder.' },
      },
    },
    input: {
      kind: 'object',
      fields: {
        sampleRateHz: { kind: 'int', min: 8000, max: 384000, doc: 'Sample rate every stream must carry; other rates are rejected and counted.' },
        encodings: { kind: 'enumList', values: ENCODINGS, minItems: 1, doc: 'Sample encodings accepted; frames in others are rejected and counted.' },
        select: { kind: 'enum', values: ['latest-active', 'pinned'], doc: 'Which own-format stream is processed when the array file maps no `inputs`: `pinned` = only input.streamId; `latest-active` = a stream becomes eligible after input.eligibleAfterMs of consecutive valid frames, and when the processed one has been silent for input.switchAfterS while another is active, the server switches to it (discontinuity flagged, journaled). PUT /api/input/stream switches by hand.' },
        streamId: { kind: 'int', min: 0, max: 0xffffffff, nullable: true, doc: 'The stream processed: with input.select pinned the only one (others are counted and dropped); with latest-active the first choice (null = the first stream to become eligible).' },
        eligibleAfterMs: { kind: 'int', min: 0, max: 60000, doc: 'With input.select latest-active: consecutive valid frames for this long (on the stream\'s own sample clock) before a stream may be processed; one stray datagram never takes over.' },
        switchAfterS: { kind: 'number', min: 0.1, max: 3600, doc: 'With input.select latest-active: silence of the processed stream after which another active stream takes over.' },
        maxFloatLevelDbfs: { kind: 'number', min: 0, max: 771, doc: 'A float32 sample above this level (20·log10|x|, full scale 0 dBFS; +60 = 1000) refuses its frame, counted `beyond_bound`. Integer samples cannot exceed 0 dBFS.' },
      },
    },
    ingest: {
      kind: 'object',
      fields: {
        udp: {
          kind: 'object',
          fields: {
            enabled: { kind: 'bool', doc: 'Listen for frames on UDP (network source only).' },
            port: { kind: 'int', min: 0, max: 65535, doc: 'UDP port; 0 picks a free port (printed at start).' },
            receiveBufferBytes: { kind: 'int', min: 65536, max: 268435456, doc: 'Requested kernel receive buffer (SO_RCVBUF; Linux grants at most net.core.rmem_max); a burst beyond it is lost in the kernel, counted in status as `listeners.udp.kernelDrops`.' },
            queueBytes: { kind: 'int', min: 1048576, max: 1073741824, doc: 'Queue between the UDP receive thread and the service thread; it absorbs stalls of the service thread. When full a datagram is dropped and counted `queue_full`.' },
          },
        },
        websocket: {
          kind: 'object',
          fields: {
            enabled: { kind: 'bool', doc: 'Accept frames as WebSocket binary messages (network source only).' },
            path: { kind: 'string', maxLength: 200, pattern: /^\/[A-Za-z0-9/_-]*$/, patternDoc: 'a URL path starting with /', doc: 'URL path of the ingest WebSocket.' },
            maxMessageBytes: { kind: 'int', min: 1024, max: 65507, doc: 'Largest message accepted; a larger one closes the connection with code 1009.' },
            maxConnections: { kind: 'int', min: 1, max: 1024, doc: 'Concurrent ingest connections; more are refused with HTTP 503.' },
          },
        },
        reorderWindowFrames: { kind: 'int', min: 1, max: 1024, doc: 'Frames held while waiting for a missing one; when full, the gap is zero-filled.' },
        reorderHoldMs: { kind: 'int', min: 0, max: 10000, doc: 'Longest a frame waits for a missing predecessor before the gap is zero-filled.' },
        maxGapSeconds: { kind: 'number', min: 0.01, max: 3600, doc: 'Larger clock jumps resynchronise the stream (flagged discontinuity) instead of zero-filling.' },
        jumpToleranceSeconds: { kind: 'number', min: 0, max: 60, doc: 'Zero-fill beyond the wall-clock time since the previous frame, at most; earned back by data received. A frame further ahead is dropped (`ahead_of_clock`) unless the next frame confirms it, which resynchronises the stream.' },
        resyncLimit: { kind: 'int', min: 1, max: 1000, doc: 'Resynchronisations allowed within ingest.resyncWindowSeconds; beyond them confirmed far-off frames are dropped (`resync_limited`) and status reports a resync storm.' },
        resyncWindowSeconds: { kind: 'number', min: 0, max: 86400, doc: 'The window of ingest.resyncLimit, seconds.' },
        maxStreams: { kind: 'int', min: 1, max: 256, doc: 'Streams tracked at once; frames of further stream ids are rejected and counted.' },
        groupHoldMs: { kind: 'int', min: 1, max: 10000, doc: 'With several inputs (the array file\'s `inputs`): a span is released once every member has it, or this long after the first member had it; a late or missing member\'s channels are zeros for that span, masked from the covariance and counted.' },
        rtp: {
          kind: 'object',
          fields: {
            sessions: {
              kind: 'recordList',
              maxItems: 64,
              fields: {
                name: { kind: 'string', maxLength: 64, pattern: /^[A-Za-z0-9._-]+$/, patternDoc: 'letters, digits, . _ -', doc: 'Name of the session (an `inputs` source in the array file).' },
                sdp: { kind: 'string', maxLength: 4096, doc: 'SDP file describing the session (relative: to the working directory).' },
              },
              doc: 'RTP sessions received (network source): [{ "name": "unit-a", "sdp": "unit-a.sdp" }]; `serve --sdp FILE` adds one named after the file. L16/L24 payloads, unicast or multicast as the SDP says.',
            },
            host: { kind: 'string', nullable: true, maxLength: 255, pattern: /^[A-Za-z0-9.:\-[\]]+$/, patternDoc: 'an IP address', doc: 'Address RTP sockets bind to (unicast) and the interface multicast groups are joined on; null = server.host. For multicast from a real network set the address facing the audio network (or 0.0.0.0), not 127.0.0.1.' },
            jitterMs: { kind: 'number', min: 0, max: 1000, doc: 'Jitter buffer of each RTP session, milliseconds: packets are released in order once they are this old (or the buffer is full); a packet missing by then is lost and becomes zeros of exactly its length.' },
            receiveBufferBytes: { kind: 'int', min: 65536, max: 268435456, doc: 'Requested kernel receive buffer of each RTP socket (SO_RCVBUF).' },
            queueBytes: { kind: 'int', min: 1048576, max: 1073741824, doc: 'Queue between each RTP receive thread and the service thread; when full a packet is dropped and counted.' },
          },
        },
      },
    },
    engine: {
      kind: 'object',
      fields: {
        workers: { kind: 'int', min: 0, max: 64, doc: 'Bin worker threads; 0 = one per core.' },
        fftSize: { kind: 'enum', values: ['256', '512', '1024', '2048', '4096'], doc: 'STFT size N (hop N/2), as a string.' },
        speedOfSoundMps: { kind: 'number', min: 200, max: 2000, doc: 'Speed of sound for steering, m/s (343.2 at 20 °C).' },
        maxPlanMiB: { kind: 'int', min: 16, max: 1048576, doc: 'Memory the processing plans may take, main and comparison chain together (steering tables and their fast-kernel copies, snapshot ring, results), MiB. A change needing more is refused with 422 before anything is built; at start the server exits with this field named.' },
        remoteWorkers: { kind: 'bool', doc: 'true: the band\'s bins are shared between the local threads and the remote bin workers (`nullsteer worker`) on the broker cluster.natsUrl, in proportion to their measured throughput (README "Large arrays"). Needs cluster.natsUrl.' },
        remoteDeadlineMs: { kind: 'int', min: 20, max: 10000, doc: 'How long a row waits for the remote workers\' parts once the local threads have theirs, ms; then it goes out marked partial (counted).' },
        remoteDropMs: { kind: 'int', min: 200, max: 60000, doc: 'A remote worker whose part has been missing past the deadline for this long is dropped and its bins re-planned over the others, ms.' },
      },
    },
    processing: {
      kind: 'object',
      fields: {
        tauS: { kind: 'number', min: PL.tauS.min, max: PL.tauS.max, doc: 'Covariance time constant τ = hop/(fs·(1−λ)), seconds; changeable live.' },
        bandLowHz: { kind: 'number', min: PL.bandLowHz.min, max: PL.bandLowHz.max, doc: 'Lowest frequency scanned, Hz.' },
        bandHighHz: { kind: 'number', min: PL.bandHighHz.min, max: PL.bandHighHz.max, doc: 'Highest frequency scanned, Hz (≤ fs/2).' },
        loadingRatio: { kind: 'number', min: PL.loadingRatio.min, max: PL.loadingRatio.max, doc: 'Diagonal loading δ = ratio·tr(R)/M at start; changeable live.' },
        spectrumRateHz: { kind: 'number', min: PL.spectrumRateHz.min, max: PL.spectrumRateHz.max, doc: 'Spectrum rows per second at start; changeable live.' },
        azimuthStepDeg: { kind: 'number', min: PL.azimuthStepDeg.min, max: PL.azimuthStepDeg.max, doc: 'Azimuth grid step, degrees (full turn, or half a turn for a line array).' },
      },
    },
    hub: {
      kind: 'object',
      fields: {
        path: { kind: 'string', maxLength: 200, pattern: /^\/[A-Za-z0-9/_-]*$/, patternDoc: 'a URL path starting with /', doc: 'WebSocket path of the live rows.' },
        maxClients: { kind: 'int', min: 1, max: 1024, doc: 'Dashboard connections at once; more get HTTP 503.' },
        maxBufferedBytes: { kind: 'int', min: 65536, max: 268435456, doc: 'Per-client socket backlog above which rows to that client wait in its queue instead.' },
        queueRows: { kind: 'int', min: 1, max: 4096, doc: 'Rows a backlogged client may have waiting; beyond it its oldest are dropped (counted for it).' },
        slowClientTimeoutMs: { kind: 'int', min: 100, max: 600000, doc: 'A client backlogged this long without draining is closed with 1013.' },
      },
    },
    outputs: {
      kind: 'object',
      fields: {
        dir: { kind: 'string', maxLength: 4096, doc: 'Folder for recordings (relative: to the working directory); REST cannot choose another.' },
        streamUdpTarget: { kind: 'string', nullable: true, maxLength: 300, pattern: /^(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+):\d{1,5}$/, patternDoc: 'HOST:PORT', doc: 'Send beam audio as ingest frames (float32) over UDP to HOST:PORT; null = off.' },
        streamId: { kind: 'int', min: 0, max: 0xffffffff, doc: 'Stream id of the beam-audio frames.' },
        streamPath: { kind: 'string', maxLength: 200, pattern: /^\/[A-Za-z0-9/_-]*$/, patternDoc: 'a URL path starting with /', doc: 'WebSocket path where beam-audio frames are pushed to subscribers.' },
        streamMaxClients: { kind: 'int', min: 1, max: 1024, doc: 'Beam-audio WebSocket listeners at once; more get HTTP 503. Listeners follow the dashboard\'s slow-client policy (hub.maxBufferedBytes, hub.slowClientTimeoutMs).' },
        streamQueueFrames: { kind: 'int', min: 1, max: 65536, doc: 'Beam-audio frames a backlogged listener may have waiting; beyond it its oldest are dropped (counted).' },
        minFreeBytes: { kind: 'int', min: 1048576, max: 1099511627776, doc: 'Free space to keep on the recordings disk: no recording starts below it (507) and a running one stops when the free space falls below it.' },
        retention: { kind: 'object', fields: RETENTION_FIELDS('recordings and event clips in outputs.dir') },
      },
    },
    data: {
      kind: 'object',
      fields: {
        dir: { kind: 'string', maxLength: 4096, doc: 'Folder for the parameter journal (journal.jsonl) and presets (presets/NAME.json); relative: to the working directory.' },
        journalMaxBytes: { kind: 'int', min: 65536, max: 1073741824, doc: 'Size at which journal.jsonl is renamed journal.1.jsonl (replacing the older one) and a new file begins: the journal takes at most twice this on disk, and start-up reads at most that much.' },
        minFreeBytes: { kind: 'int', min: 65536, max: 1099511627776, doc: 'Free space to keep on the data folder\'s disk: preset saves are refused below it (507).' },
        retention: { kind: 'object', fields: RETENTION_FIELDS('level and event logs (data.dir/levels, data.dir/events)') },
      },
    },
    simulator: {
      kind: 'object',
      fields: {
        seed: { kind: 'int', min: 0, max: 0xffffffff, doc: 'Seed of the built-in scenario (same seed, same signals).' },
        blockFrames: { kind: 'int', min: 16, max: 16384, doc: 'Samples per channel in each simulated block; with more than 64 channels the blocks are shortened in proportion (at least 32), so that rendering one never holds the server for long.' },
        speedOfSoundMps: { kind: 'number', min: 200, max: 2000, doc: 'Speed of sound used to place the simulated sources, m/s.' },
        scene: { kind: 'string', nullable: true, maxLength: 4096, doc: 'A site scene file (sources in the site frame; README "A site of arrays"): the simulator renders what this array, at its pose on the site plan, hears of it, on a sample clock taken from UTC so that several servers render one scene. null: the built-in scene.' },
      },
    },
    cluster: {
      kind: 'object',
      fields: {
        natsUrl: { kind: 'string', nullable: true, maxLength: 300, pattern: /^nats:\/\/(\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9.-]+)(:\d{1,5})?$/, patternDoc: 'nats://host:port', doc: 'The site\'s NATS broker (with JetStream). null: this server publishes nothing and runs alone.' },
        site: { kind: 'string', maxLength: 32, pattern: /^[A-Za-z0-9_-]{1,32}$/, patternDoc: '1–32 letters, digits, _ or -', doc: 'Site name: the subjects are nullsteer.SITE.NODE.* and the JetStream stream is NULLSTEER_SITE.' },
        node: { kind: 'string', maxLength: 32, pattern: /^[A-Za-z0-9_-]{1,32}$/, patternDoc: '1–32 letters, digits, _ or -', doc: 'This server\'s node name on the site (unique per site).' },
        token: { kind: 'string', nullable: true, maxLength: 256, pattern: /^[\x21-\x7e]{1,256}$/, patternDoc: 'printable ASCII, no spaces', doc: 'Token for the broker, when it asks for one (better given as NULLSTEER_NATS_TOKEN than in a file).' },
        durableMaxAgeS: { kind: 'int', min: 60, max: 31536000, doc: 'How long the site\'s JetStream stream keeps journal and peak entries, seconds.' },
        durableMaxBytes: { kind: 'int', min: 1048576, max: 1099511627776, doc: 'Most bytes the site\'s JetStream stream keeps (oldest entries go first).' },
        pendingMaxEntries: { kind: 'int', min: 16, max: 1000000, doc: 'Journal and peak entries held while the broker is unreachable; beyond it the oldest peak entries are dropped and counted (journal entries are kept first).' },
      },
    },
    // Unattended monitoring (issue 16). Webhooks: server/monitor/webhooks.ts.
    monitor: {
      kind: 'object',
      fields: {
        preTriggerS: { kind: 'number', min: 0, max: 60, doc: 'Seconds of raw input kept for event clips (all channels, float32: channels × sample rate × this × 4 bytes, allocated at start; 24 channels at 48 kHz for 10 s is 46 MB; at most 256 MiB, a very large array gets a shorter ring, status monitor.clips.preTriggerS): a clip can start this long before its trigger.' },
        omniWeighting: { kind: 'enum', values: ['A', 'C', 'Z'], doc: 'Frequency weighting (IEC 61672-1) of the array-as-one-microphone level (series omni of GET /api/levels); sectors name their own.' },
        webhooks: {
          kind: 'recordList',
          maxItems: 8,
          optional: ['events'],
          fields: {
            url: { kind: 'string', maxLength: 2048, pattern: /^https?:\/\/[^\s/?#@]+(?:[/?#][^\s]*)?$/, patternDoc: 'an http:// or https:// URL without user:password@', doc: 'Where the event is POSTed.' },
            secret: { kind: 'string', pattern: /^[\x21-\x7e]{16,256}$/, patternDoc: '16–256 printable ASCII characters, no spaces', doc: 'Key of the HMAC-SHA256 signature over the body.' },
            events: { kind: 'enumList', values: ['started', 'updated', 'ended'], minItems: 1, doc: 'Event messages sent to this hook; missing: all three.' },
          },
          doc: 'Alarms out: events POSTed as JSON to each hook, signed `x-nullsteer-signature: sha256=HEX` (HMAC-SHA256 of the exact body with the hook\'s secret), retried with exponential back-off, at most 256 waiting per hook (the oldest dropped and counted): [{ "url": "https://example.org/hook", "secret": "...", "events": ["started", "ended"] }].',
        },
      },
    },
    site: {
      kind: 'object',
      fields: {
        windowS: { kind: 'number', min: 0.1, max: 10, doc: 'The site service locates sources per window of this length, aligned on UTC, seconds.' },
        offlineAfterS: { kind: 'number', min: 0.5, max: 60, doc: 'A node not heard from (status every second) for this long is shown offline and not used.' },
      },
    },
  },
};

/** outputs.retention, data.retention: null = no limit. */
export interface RetentionLimits {
  maxAgeDays: number | null;
  maxBytes: number | null;
}

/** The validated configuration. */
export interface Config {
  server: { host: string; httpPort: number; token: string | null; allowedHosts: string[]; allowedOrigins: string[] };
  access: { openStatus: boolean; controlRatePerS: number; controlBurst: number; authFailureRatePerS: number; authFailureBurst: number };
  source: { kind: 'simulator' | 'network' | 'capture' };
  capture: { command: string[]; channels: number; encoding: 'int16' | 'int24' | 'int32' | 'float32'; sampleRateHz: number | null; restartMinMs: number; restartMaxMs: number; queueMs: number };
  array: { file: string };
  input: { sampleRateHz: number; encodings: ('int16' | 'int24' | 'int32' | 'float32')[]; select: 'latest-active' | 'pinned'; streamId: number | null; eligibleAfterMs: number; switchAfterS: number; maxFloatLevelDbfs: number };
  ingest: {
    udp: { enabled: boolean; port: number; receiveBufferBytes: number; queueBytes: number };
    websocket: { enabled: boolean; path: string; maxMessageBytes: number; maxConnections: number };
    reorderWindowFrames: number;
    reorderHoldMs: number;
    maxGapSeconds: number;
    jumpToleranceSeconds: number;
    resyncLimit: number;
    resyncWindowSeconds: number;
    maxStreams: number;
    groupHoldMs: number;
    rtp: { sessions: { name: string; sdp: string }[]; host: string | null; jitterMs: number; receiveBufferBytes: number; queueBytes: number };
  };
  engine: { workers: number; fftSize: '256' | '512' | '1024' | '2048' | '4096'; speedOfSoundMps: number; maxPlanMiB: number; remoteWorkers: boolean; remoteDeadlineMs: number; remoteDropMs: number };
  processing: { tauS: number; bandLowHz: number; bandHighHz: number; loadingRatio: number; spectrumRateHz: number; azimuthStepDeg: number };
  hub: { path: string; maxClients: number; maxBufferedBytes: number; queueRows: number; slowClientTimeoutMs: number };
  outputs: { dir: string; streamUdpTarget: string | null; streamId: number; streamPath: string; streamMaxClients: number; streamQueueFrames: number; minFreeBytes: number; retention: RetentionLimits };
  data: { dir: string; journalMaxBytes: number; minFreeBytes: number; retention: RetentionLimits };
  simulator: { seed: number; blockFrames: number; speedOfSoundMps: number; scene: string | null };
  cluster: { natsUrl: string | null; site: string; node: string; token: string | null; durableMaxAgeS: number; durableMaxBytes: number; pendingMaxEntries: number };
  site: { windowS: number; offlineAfterS: number };
  monitor: { preTriggerS: number; omniWeighting: 'A' | 'C' | 'Z'; webhooks: { url: string; secret: string; events?: ('started' | 'updated' | 'ended')[] }[] };
}

/** Walk the schema and list every leaf with its dotted path (for docs and `--set`). */
export function schemaLeaves(spec: FieldSpec = CONFIG_SCHEMA, prefix = ''): { path: string; spec: Exclude<FieldSpec, { kind: 'object' }> }[] {
  if (spec.kind !== 'object') return [{ path: prefix, spec }];
  return Object.entries(spec.fields).flatMap(([k, s]) => schemaLeaves(s, prefix ? `${prefix}.${k}` : k));
}

/** Human description of a leaf's allowed values, as used in error messages and the README. */
export function allowedText(spec: Exclude<FieldSpec, { kind: 'object' }>): string {
  const orNull = 'nullable' in spec && spec.nullable ? ' or null' : '';
  switch (spec.kind) {
    case 'int':
      return `integer ${spec.min}–${spec.max}${orNull}`;
    case 'number':
      return `number ${spec.min}–${spec.max}${orNull}`;
    case 'string':
      return `${spec.patternDoc ?? 'string'}${spec.maxLength ? ` (≤ ${spec.maxLength} characters)` : ''}${orNull}`;
    case 'enum':
      return `one of ${spec.values.join(', ')}`;
    case 'enumList':
      return `list of ${spec.values.join(', ')} (at least ${spec.minItems})`;
    case 'stringList':
      return `list of ${spec.patternDoc} (at most ${spec.maxItems}, each ≤ ${spec.maxLength} characters)`;
    case 'bool':
      return 'true or false';
    case 'recordList':
      return `list of at most ${spec.maxItems} { ${Object.entries(spec.fields).map(([k, f]) => `"${k}"${spec.optional?.includes(k) ? '?' : ''}: ${allowedText(f)}`).join(', ')} }`;
  }
}
