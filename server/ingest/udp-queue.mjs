// The shared queue between the UDP receive thread (udp-receiver.mjs) and the service's thread
// (udp.ts): its control words and record format, defined once for both (plain JavaScript, so the
// receive thread needs no TypeScript loader). Layout and policies: udp.ts's module comment.

/** Control words (Int32Array over their own SharedArrayBuffer). */
export const HEAD = 0;
export const TAIL = 1;
export const SLEEPING = 2;
export const DROPPED = 3;
/** Bytes before a record's payload: u32 size, u16 kind, u16 remote id, f64 arrival ms, u32 length. */
export const RECORD_HEADER = 20;
export const KIND_DATAGRAM = 1;
export const KIND_REMOTE = 2;
/** Remote addresses given an id at most (further ones share the last). */
export const MAX_REMOTES = 256;
