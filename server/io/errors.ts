/**
 * The error catalogue of the sample-file layer (server/io): WAV, RF64 and raw files. Each code has
 * one message prefix and the built-in class it is thrown as (TypeError: the file is not the kind of
 * data we read; RangeError: a size or position is out of bounds; Error: the file system misbehaved).
 * The thrown error's message is `<prefix>: <detail>` and it carries `code`, so callers can match on
 * the code and still print a self-explaining message.
 */

type ErrorClass = typeof Error | typeof RangeError | typeof TypeError;

export const IO_ERRORS = {
  ERR_WAV_NOT_WAVE: { errorClass: TypeError, message: 'not a RIFF/WAVE or RF64 file' },
  ERR_WAV_MALFORMED: { errorClass: RangeError, message: 'malformed WAV file' },
  ERR_WAV_UNSUPPORTED_FORMAT: { errorClass: TypeError, message: 'unsupported WAV sample format' },
  ERR_WAV_NO_FMT: { errorClass: TypeError, message: 'WAV file has no fmt chunk' },
  ERR_WAV_NO_DATA: { errorClass: TypeError, message: 'WAV file has no data chunk' },
  ERR_WAV_TOO_LARGE: { errorClass: RangeError, message: 'WAV data too large for a RIFF file' },
  ERR_IO_BAD_FORMAT: { errorClass: RangeError, message: 'invalid sample format' },
  ERR_IO_FRAME_RANGE: { errorClass: RangeError, message: 'frame range outside the file' },
  ERR_IO_BAD_SAMPLES: { errorClass: RangeError, message: 'sample data does not fit the format' },
  ERR_IO_SHORT_READ: { errorClass: Error, message: 'file ended before the expected data' },
  ERR_IO_CLOSED: { errorClass: Error, message: 'sample file reader is closed' },
} as const satisfies Record<string, { errorClass: ErrorClass; message: string }>;

export type IoErrorCode = keyof typeof IO_ERRORS;

export interface IoError extends Error {
  code: IoErrorCode;
}

/** Build the catalogue's error for `code`; `detail` names the values involved. */
export function ioError(code: IoErrorCode, detail: string): IoError {
  const spec = IO_ERRORS[code];
  const err = new spec.errorClass(`${spec.message}: ${detail}`) as IoError;
  err.code = code;
  return err;
}

export function isIoError(e: unknown): e is IoError {
  return e instanceof Error && typeof (e as { code?: unknown }).code === 'string' && (e as IoError).code in IO_ERRORS;
}
