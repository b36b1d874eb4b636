/**
 * Every live input the configuration names, assembled into one block stream on the array's sample
 * clock. service.ts starts one of these for a live source and knows nothing of the parts:
 *
 * - own-format frames over UDP and WebSocket (ingest-hub.ts: validation, sequencing, selection);
 * - RTP sessions described by SDP (rtp/: one socket and receive thread per session);
 * - a capture command's standard output (capture.ts);
 * - with the array file's `inputs`, several of those as members of one array (group.ts merges
 *   them on their shared sample index).
 *
 * Without `inputs` one input feeds every position: the processed own-format stream, the single RTP
 * session (own-format ingest is then not opened), or the capture command. Problems of the set-up
 * (an input named nowhere, channel counts that do not fit, several sessions without a mapping) are
 * configuration errors at start, naming the field.
 */
import { readFileSync } from 'node:fs';
import { resolve } from 'node:path';
import type { ArrayGeometry, Block, BlockSink, InputMapping } from '../../shared/types.ts';
import type { LoadedConfig } from '../config/load.ts';
import { ConfigError, type ConfigIssue } from '../config/validate.ts';
import { CaptureSource, type CaptureStatus } from './capture.ts';
import { GroupMerger, memberDelaysUs, type GroupStatus } from './group.ts';
import { IngestHub, type StreamStatus, type StreamSwitch } from './ingest-hub.ts';
import { startRtpSession, type RtpSession } from './rtp/rtp-receiver.ts';
import { RtpStream, type RtpStreamStatus } from './rtp/rtp-stream.ts';
import { parseSessionSdp, SdpError, type RtpSessionDescription } from './rtp/sdp.ts';
import { startUdpIngest, type UdpIngest } from './udp.ts';
import { createWebSocketIngest, type WebSocketIngest } from './websocket.ts';

/** How often held frames and packets are checked against their hold times, ms. */
const TICK_MS = 10;
/** Largest SDP file read, bytes. */
const MAX_SDP_BYTES = 65536;

export interface InputHooks {
  /** The processed stream changed (journal it). */
  onSwitch?: (s: StreamSwitch) => void;
  /** Test hook: an RTP session's port instead of its SDP's (0 = any free port). */
  rtpPort?: (name: string) => number | undefined;
}

/** Why a stream cannot be chosen by hand. */
export class InputChoiceError extends Error {
  constructor(
    readonly kind: 'unknown' | 'fixed',
    message: string,
    readonly seen: number[] = [],
  ) {
    super(message);
  }
}

interface RtpInput {
  desc: RtpSessionDescription;
  stream: RtpStream;
  session: RtpSession | null;
}

/** The geometry with each member's measured offset (`offsetUs`) added to its positions' calibration delays. */
export function withMemberOffsets(g: ArrayGeometry): ArrayGeometry {
  if (!g.inputs || g.inputs.every((i) => !i.offsetUs)) return g;
  const m = g.positions.length;
  const extra = memberDelaysUs(g.inputs, m);
  const cal = g.calibration ?? { gainDb: Array(m).fill(0), delayUs: Array(m).fill(0) };
  return { ...g, calibration: { ...cal, delayUs: cal.delayUs.map((d, p) => d + extra[p]) } };
}

/** Read and parse the SDP files of the configured RTP sessions; every problem is a config issue. */
function readSessions(loaded: LoadedConfig, issues: ConfigIssue[]): RtpSessionDescription[] {
  const out: RtpSessionDescription[] = [];
  const names = new Set<string>();
  loaded.config.ingest.rtp.sessions.forEach((s, i) => {
    const path = `ingest.rtp.sessions[${i}]`;
    if (names.has(s.name)) issues.push({ path: `${path}.name`, value: s.name, message: `${path}.name = ${JSON.stringify(s.name)}: two sessions have this name` });
    names.add(s.name);
    let text: string;
    try {
      const buf = readFileSync(resolve(s.sdp));
      if (buf.byteLength > MAX_SDP_BYTES) throw Object.assign(new Error('too large'), { code: `larger than ${MAX_SDP_BYTES} bytes` });
      text = buf.toString('utf8');
    } catch (e) {
      issues.push({ path: `${path}.sdp`, value: s.sdp, message: `${path}.sdp = ${JSON.stringify(s.sdp)}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})` });
      return;
    }
    try {
      out.push(parseSessionSdp(text, s.name));
    } catch (e) {
      if (!(e instanceof SdpError)) throw e;
      issues.push({ path: `${path}.sdp`, value: s.sdp, message: `${path}.sdp (${s.sdp}): ${e.message}` });
    }
  });
  return out;
}

export class Inputs {
  readonly hub: IngestHub | null = null;
  readonly group: GroupMerger | null = null;
  readonly capture: CaptureSource | null = null;
  readonly rtp: RtpInput[] = [];
  wsIngest: WebSocketIngest | null = null;
  udp: UdpIngest | null = null;
  readonly #loaded: LoadedConfig;
  readonly #hooks: InputHooks;
  #ticker: NodeJS.Timeout | null = null;
  #closed = false;

  constructor(loaded: LoadedConfig, sink: BlockSink, hooks: InputHooks = {}) {
    this.#loaded = loaded;
    this.#hooks = hooks;
    const { config, geometry } = loaded;
    const fs = config.input.sampleRateHz;
    const m = geometry.positions.length;
    const issues: ConfigIssue[] = [];
    const issue = (path: string, value: unknown, message: string) => issues.push({ path, value, message: `${path} = ${JSON.stringify(value)}: ${message}` });
    if (config.input.select === 'pinned' && config.input.streamId === null) issue('input.streamId', null, 'input.select pinned needs the stream id to process');
    const kind = config.source.kind;
    const sessions = kind === 'network' ? readSessions(loaded, issues) : [];
    if (kind === 'capture' && config.ingest.rtp.sessions.length > 0) issue('ingest.rtp.sessions', `${config.ingest.rtp.sessions.length} sessions`, 'RTP sessions are received with source.kind network, not capture');
    for (const d of sessions) if (d.sampleRateHz !== fs) issue(`ingest.rtp.sessions`, d.name, `session ${d.name} is at ${d.sampleRateHz} Hz, input.sampleRateHz is ${fs}`);
    const captureRate = config.capture.sampleRateHz ?? fs;
    if (kind === 'capture' && captureRate !== fs) issue('capture.sampleRateHz', captureRate, `must equal input.sampleRateHz (${fs})`);
    if (kind === 'capture' && config.capture.command.length === 0) issue('capture.command', [], 'source.kind capture needs the command to run');
    if (config.capture.restartMaxMs < config.capture.restartMinMs) issue('capture.restartMaxMs', config.capture.restartMaxMs, `must be at least capture.restartMinMs (${config.capture.restartMinMs})`);

    // Members: from the array file's inputs, else the one input that feeds every position.
    const inputs: InputMapping[] | undefined = geometry.inputs;
    const byName = new Map(sessions.map((d) => [d.name, d]));
    const memberOf = new Map<string, number>();
    if (inputs) {
      inputs.forEach((inp, i) => {
        memberOf.set(inp.source, i);
        const need = Math.max(...inp.channels, inp.referenceChannel ?? 0) + 1;
        if (inp.source === 'capture') {
          if (kind !== 'capture') issue(`array inputs[${i}].source`, inp.source, 'names the capture command, but source.kind is not capture');
          else if (config.capture.channels < need) issue('capture.channels', config.capture.channels, `the array file's inputs[${i}] maps channel ${need - 1} of the capture`);
        } else if (inp.source.startsWith('stream:')) {
          if (kind !== 'network') issue(`array inputs[${i}].source`, inp.source, 'names own-format frames, but source.kind is not network');
        } else {
          const d = byName.get(inp.source);
          if (!d) issue(`array inputs[${i}].source`, inp.source, `names no RTP session (configured: ${[...byName.keys()].join(', ') || 'none'})`);
          else if (d.channels < need) issue(`array inputs[${i}].channels`, inp.channels, `session ${d.name} carries ${d.channels} channels; channel ${need - 1} is mapped`);
        }
      });
      for (const d of sessions) if (!memberOf.has(d.name)) issue('ingest.rtp.sessions', d.name, `session ${d.name} feeds no position: add it to the array file's inputs`);
      if (kind === 'capture' && !memberOf.has('capture')) issue('array inputs', inputs.map((i) => i.source), 'with source.kind capture the array file\'s inputs must name "capture"');
    } else {
      if (sessions.length > 1) issue('ingest.rtp.sessions', sessions.map((d) => d.name), 'several RTP sessions need the array file\'s inputs (which session feeds which position)');
      if (sessions.length === 1 && sessions[0].channels !== m) issue('ingest.rtp.sessions', sessions[0].name, `session ${sessions[0].name} carries ${sessions[0].channels} channels, the array has ${m}; map them with the array file's inputs`);
      if (kind === 'capture' && config.capture.channels !== m) issue('capture.channels', config.capture.channels, `the array has ${m} positions; map the capture's channels with the array file's inputs`);
    }
    if (issues.length > 0) throw new ConfigError(issues);

    const maxGapS = config.ingest.maxGapSeconds;
    const rtpOpts = { jitterMs: config.ingest.rtp.jitterMs, sampleRateHz: fs, maxGapSeconds: maxGapS, jumpToleranceSeconds: config.ingest.jumpToleranceSeconds, resyncLimit: config.ingest.resyncLimit, resyncWindowMs: config.ingest.resyncWindowSeconds * 1000 };
    const captureOpts = { command: config.capture.command, channels: config.capture.channels, encoding: config.capture.encoding, sampleRateHz: fs, restartMinMs: config.capture.restartMinMs, restartMaxMs: config.capture.restartMaxMs, queueMs: config.capture.queueMs };

    let merger: GroupMerger | null = null;
    if (inputs) {
      merger = new GroupMerger(
        {
          channels: m,
          sampleRateHz: fs,
          holdMs: config.ingest.groupHoldMs,
          members: inputs.map((i) => ({ name: i.source, channels: i.channels, positions: i.positions, referenceChannel: i.referenceChannel })),
          warnAboveUs: 1e6 / (10 * config.processing.bandHighHz),
        },
        sink,
      );
      this.group = merger;
    }
    const g = merger;
    const feed = (name: string): BlockSink => (g ? (b: Block) => g.push(memberOf.get(name)!, b) : sink);
    const timing = (name: string) => (g ? (at: number, arrivalMs: number) => g.timing(memberOf.get(name)!, at, arrivalMs) : undefined);

    for (const d of sessions) this.rtp.push({ desc: d, stream: new RtpStream(d, rtpOpts, feed(d.name), timing(d.name)), session: null });
    if (kind === 'capture') this.capture = new CaptureSource(captureOpts, feed('capture'));

    // Own-format frames: always for a network source, except when one RTP session is the whole array.
    const streamMembers = new Map<number, number>();
    for (const inp of inputs ?? []) {
      if (inp.source.startsWith('stream:')) streamMembers.set(Number(inp.source.slice(7)), Math.max(...inp.channels, inp.referenceChannel ?? 0) + 1);
    }
    const ownFormat = kind === 'network' && (inputs !== undefined || sessions.length === 0);
    if (ownFormat) {
      this.hub = new IngestHub(
        {
          sampleRateHz: fs,
          channels: m,
          encodings: config.input.encodings,
          maxFloatLevelDbfs: config.input.maxFloatLevelDbfs,
          streamId: config.input.streamId,
          maxStreams: config.ingest.maxStreams,
          selection: { mode: config.input.select, eligibleAfterSamples: Math.round((config.input.eligibleAfterMs * fs) / 1000), switchAfterMs: config.input.switchAfterS * 1000 },
          onSwitch: hooks.onSwitch,
          ...(inputs ? { members: streamMembers, memberSink: (id: number, b: Block) => g!.push(memberOf.get(`stream:${id}`)!, b), onTiming: (id: number, first: number, at: number) => g!.timing(memberOf.get(`stream:${id}`)!, first, at) } : {}),
          sequencer: {
            reorderWindowFrames: config.ingest.reorderWindowFrames,
            reorderHoldMs: config.ingest.reorderHoldMs,
            maxGapSamples: Math.round(maxGapS * fs),
            maxGapBlockFrames: 4096,
            jumpToleranceSamples: Math.round(config.ingest.jumpToleranceSeconds * fs),
            resyncLimit: config.ingest.resyncLimit,
            resyncWindowMs: config.ingest.resyncWindowSeconds * 1000,
          },
        },
        sink,
      );
      if (config.ingest.websocket.enabled) this.wsIngest = createWebSocketIngest(this.hub, config.ingest.websocket);
    }
  }

  /** Open the sockets and start the command; call once the HTTP server listens. */
  async listen(): Promise<void> {
    const { config } = this.#loaded;
    const hub = this.hub;
    if (hub && config.ingest.udp.enabled) {
      this.udp = await startUdpIngest(hub, config.server.host, config.ingest.udp.port, { receiveBufferBytes: config.ingest.udp.receiveBufferBytes, queueBytes: config.ingest.udp.queueBytes });
    }
    for (const r of this.rtp) {
      r.session = await startRtpSession(r.desc, r.stream, { host: config.ingest.rtp.host ?? config.server.host, port: this.#hooks.rtpPort?.(r.desc.name), receiveBufferBytes: config.ingest.rtp.receiveBufferBytes, queueBytes: config.ingest.rtp.queueBytes });
    }
    this.capture?.start();
    this.#ticker = setInterval(() => this.tick(), TICK_MS);
    this.#ticker.unref();
  }

  tick(nowMs = performance.now()): void {
    this.hub?.tick(nowMs);
    for (const r of this.rtp) r.stream.tick(nowMs);
    this.group?.tick(nowMs);
  }

  /** Nothing has arrived yet from any live input. */
  streams(nowMs = performance.now()): StreamStatus[] {
    return this.hub ? this.hub.status(nowMs) : [];
  }

  /** The RTP sessions in status: the stream's figures, the SDP's and the socket's. */
  rtpStatus(nowMs = performance.now()): Record<string, unknown>[] {
    return this.rtp.map((r) => {
      const s: RtpStreamStatus = r.stream.status(nowMs);
      const k = r.session?.kernel() ?? null;
      return {
        ...s,
        address: r.desc.connectionAddress,
        port: r.session?.port ?? r.desc.port,
        multicast: r.desc.multicast,
        sourceFilter: r.desc.sourceFilter,
        sdpWarnings: r.desc.warnings,
        lastRejected: s.lastRejected ? s.lastRejected.detail : null,
        lastRejectedReason: s.lastRejected?.reason ?? null,
        socket: r.session ? { receiveBufferBytes: r.session.receiveBufferBytes, kernelDrops: k ? k.drops : null, queueDrops: r.session.queueDrops, queuedBytes: r.session.queuedBytes, receiverRestarts: r.session.receiverRestarts } : null,
      };
    });
  }

  captureStatus(): (CaptureStatus & { lastExit: string | null; commandLine: string }) | null {
    if (!this.capture) return null;
    const s = this.capture.status();
    const e = s.lastExits.at(-1);
    return { ...s, commandLine: s.command.join(' '), lastExit: e ? (e.signal ? `ended by ${e.signal} after ${(e.runMs / 1000).toFixed(1)} s` : `exited with code ${e.code} after ${(e.runMs / 1000).toFixed(1)} s`) : null };
  }

  groupStatus(nowMs = performance.now()): (GroupStatus & { warnAboveUs: number; members: (GroupStatus['members'][number] & { source: string; positions: number[] })[] }) | null {
    if (!this.group) return null;
    const s = this.group.status(nowMs);
    const inputs = this.#loaded.geometry.inputs ?? [];
    return { ...s, warnAboveUs: 1e6 / (10 * this.#loaded.config.processing.bandHighHz), members: s.members.map((mm, i) => ({ ...mm, source: inputs[i]?.source ?? mm.name, positions: inputs[i]?.positions ?? [] })) };
  }

  /**
   * The processed stream and how it was chosen, the capture, RTP sessions and members, and whether
   * nothing has arrived yet from any input (`waiting`): status and GET /api/input. `streams` is the
   * hub's status when the caller has it already.
   */
  selection(nowMs = performance.now(), streams: StreamStatus[] = this.streams(nowMs)): Record<string, unknown> {
    const hub = this.hub;
    const st = streams.find((s) => s.selected) ?? null;
    const cap = this.captureStatus();
    const rtp = this.rtpStatus(nowMs);
    const cfg = this.#loaded.config.input;
    return {
      waiting: streams.every((s) => s.samplesAccepted === 0) && rtp.every((r) => r.packets === 0) && (cap === null || cap.samplesRead === 0),
      mode: hub && !this.group ? cfg.select : null,
      selectedStreamId: hub && !this.group ? hub.selectedStream : null,
      selected: st ? { streamId: st.streamId, transport: st.transport, remote: st.remote, lastFrameAgoS: st.lastFrameAgoS } : null,
      switches: hub ? hub.switches : 0,
      lastSwitch: hub ? hub.lastSwitch : null,
      eligibleAfterMs: cfg.eligibleAfterMs,
      switchAfterS: cfg.switchAfterS,
      capture: cap ? { ...cap, command: cap.commandLine, argv: cap.command, error: cap.error ? cap.error.message : null } : null,
      rtp,
      group: this.groupStatus(nowMs),
    };
  }

  /** Process own-format stream `id` from now on. */
  selectStream(id: number): void {
    const hub = this.hub;
    if (!hub) throw new InputChoiceError('fixed', `the input is ${this.#loaded.config.source.kind === 'capture' ? 'the capture command' : 'an RTP session'}, not chosen by stream`);
    if (this.group) throw new InputChoiceError('fixed', "the array is merged from the array file's inputs; its streams are fixed there");
    if (!hub.select(id)) throw new InputChoiceError('unknown', `no stream ${id} has been received`, hub.status().map((s) => s.streamId));
  }

  async close(): Promise<void> {
    if (this.#closed) return;
    this.#closed = true;
    if (this.#ticker) clearInterval(this.#ticker);
    await this.capture?.stop();
    await this.udp?.close();
    await this.wsIngest?.close();
    for (const r of this.rtp) await r.session?.close();
    this.hub?.flush();
    for (const r of this.rtp) r.stream.flush();
    this.group?.flush();
  }
}
