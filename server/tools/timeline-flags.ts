/**
 * The flags of `analyze --timeline`, in one place: timeline.ts parses them, analyze.ts checks them
 * first (a misspelt one gets a clean message and a suggestion) without loading the engine.
 */
export const TIMELINE_OPTIONS = {
  timeline: { type: 'string' },
  array: { type: 'string' },
  preset: { type: 'string' },
  'no-replay': { type: 'boolean' },
  'image-method': { type: 'string' },
  plain: { type: 'boolean' },
  workers: { type: 'string' },
  c: { type: 'string' },
  quiet: { type: 'boolean' },
} as const;
