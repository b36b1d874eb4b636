// Polling a server resource from a panel: only while the live connection is online, and asked
// afresh on each (re)connection (the server may have been restarted or updated meanwhile).
import { untrack } from 'svelte';
import type { LiveConnection } from './live.svelte.ts';

/**
 * Call during a component's setup, `getLive` reading the component's prop. While it is online: `onConnect` once per (re)connection
 * (untracked), then `refresh` every `ms` milliseconds; the timer stops when the connection drops
 * or the component goes.
 */
export function pollWhileOnline(getLive: () => LiveConnection, ms: number, onConnect: () => void, refresh: () => void): void {
  $effect(() => {
    const live = getLive();
    if (live.status !== 'online') return;
    void live.opens;
    untrack(onConnect);
    const t = setInterval(refresh, ms);
    return () => clearInterval(t);
  });
}
