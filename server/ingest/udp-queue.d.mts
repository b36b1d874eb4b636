// Types of udp-queue.mjs (the receive thread's shared-queue layout).
export declare const HEAD: 0;
export declare const TAIL: 1;
export declare const SLEEPING: 2;
export declare const DROPPED: 3;
export declare const RECORD_HEADER: 20;
export declare const KIND_DATAGRAM: 1;
export declare const KIND_REMOTE: 2;
export declare const MAX_REMOTES: 256;
