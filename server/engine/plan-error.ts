/**
 * A processing plan that cannot be built: too large for the plan budget or a worker's cap
 * ('too-large', checked before anything is built), refused by a worker while building it
 * ('refused'), or not built in time ('timeout'). The plan in force keeps running in every case.
 * For 'too-large' the message is `<fields>: <why, naming the limit>`.
 */
export type PlanErrorKind = 'too-large' | 'refused' | 'timeout';

const PLAN_ERROR_CODES = { 'too-large': 'ERR_PLAN_TOO_LARGE', refused: 'ERR_PLAN_REFUSED', timeout: 'ERR_PLAN_TIMEOUT' } as const;

export class PlanError extends Error {
  readonly kind: PlanErrorKind;
  readonly code: (typeof PLAN_ERROR_CODES)[PlanErrorKind];
  constructor(kind: PlanErrorKind, message: string) {
    super(message);
    this.name = 'PlanError';
    this.kind = kind;
    this.code = PLAN_ERROR_CODES[kind];
  }
}
