/** The dashboard beam player's settings (beam-player.svelte.ts), in a plain module so tests can read them. */
export const START_VOLUME_DB = -24;
export const MIN_VOLUME_DB = -60;
export const MAX_VOLUME_DB = 0;
/** Limiter ceiling of the player, dBFS (always on). */
export const LISTEN_CEILING_DBFS = -6;
/** Jitter buffer: playing starts with this much buffered, ms; at most this much is kept (oldest dropped). */
export const JITTER_TARGET_MS = 150;
export const JITTER_CAPACITY_MS = 300;
/** Largest stream jump filled with zeros, s; beyond it the player starts a new timeline. */
export const MAX_GAP_S = 2;
/** Samples of the start kept for checks (what arrived, what was played). */
export const RECORD_SAMPLES = 4096;
export const DEFAULT_STREAM_PATH = '/api/beams/audio';
export const CAUTION_KEY = 'nullsteer.listenCautionAcknowledged';
export const CAUTION_TEXT =
  'Steered audio on headphones can be loud: start low. Recording or listening to people’s speech may be regulated where you are — follow local law.';

