/**
 * The error catalogue of `nullsteer send`: one code per failure with its message prefix, the
 * built-in class it is thrown as, and the process exit code the command returns for it
 * (2 = the command line or options are wrong, 1 = the file, the input or the network failed).
 */

type ErrorClass = typeof Error | typeof RangeError | typeof TypeError;

export const SEND_ERRORS = {
  ERR_SEND_USAGE: { errorClass: TypeError, exitCode: 2, message: 'invalid command line' },
  ERR_SEND_OPTION: { errorClass: RangeError, exitCode: 2, message: 'invalid send option' },
  ERR_SEND_TOO_WIDE: { errorClass: RangeError, exitCode: 1, message: 'file too wide for a frame' },
  ERR_SEND_EMPTY: { errorClass: RangeError, exitCode: 1, message: 'nothing to send' },
  ERR_SEND_INPUT: { errorClass: Error, exitCode: 1, message: 'reading the input failed' },
  ERR_SEND_CONNECT: { errorClass: Error, exitCode: 1, message: 'cannot reach the target' },
  ERR_SEND_TRANSPORT: { errorClass: Error, exitCode: 1, message: 'sending failed' },
} as const satisfies Record<string, { errorClass: ErrorClass; exitCode: number; message: string }>;

export type SendErrorCode = keyof typeof SEND_ERRORS;

export interface SendError extends Error {
  code: SendErrorCode;
  /** For ERR_SEND_OPTION: the SendOptions field at fault, so the CLI can name its flag instead. */
  option?: string;
  /** For ERR_SEND_OPTION: the offending value and what is allowed, without the field name. */
  reason?: string;
}

export function sendError(code: SendErrorCode, detail: string, cause?: unknown): SendError {
  const spec = SEND_ERRORS[code];
  const err = new spec.errorClass(`${spec.message}: ${detail}`, cause === undefined ? undefined : { cause }) as SendError;
  err.code = code;
  return err;
}

/** An ERR_SEND_OPTION error: `<option> <value>: <why>; allowed <allowed>`. */
export function optionError(option: string, value: unknown, why: string, allowed: string): SendError {
  const reason = `${String(value)}: ${why}; allowed ${allowed}`;
  const err = sendError('ERR_SEND_OPTION', `${option} ${reason}`);
  err.option = option;
  err.reason = reason;
  return err;
}

export function isSendError(e: unknown): e is SendError {
  return e instanceof Error && typeof (e as { code?: unknown }).code === 'string' && (e as SendError).code in SEND_ERRORS;
}
