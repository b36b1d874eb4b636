/**
 * The site broker as the status strip shows it: status `cluster` (server/cluster/edge-publisher.ts)
 * reduced to its state and the durable entries waiting for it. Null when the server has no broker
 * configured (state "off") or does not report one.
 */
import { num, obj, str, type Obj } from './status-summary.ts';

export interface BrokerView {
  state: 'connected' | 'reconnecting';
  /** Peak and journal entries held for the broker. */
  pending: number;
  dropped: number;
  url: string | null;
  lastError: string | null;
}

export function summariseBroker(raw: Obj): BrokerView | null {
  const c = obj(raw.cluster);
  const state = str(c?.state);
  if (state !== 'connected' && state !== 'reconnecting') return null;
  return { state, pending: num(c?.pending) ?? 0, dropped: num(c?.dropped) ?? 0, url: str(c?.url), lastError: str(c?.lastError) };
}
