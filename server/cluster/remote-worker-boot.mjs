// One remote bin worker in a thread of `nullsteer worker --threads N` (tsx registered as for bin workers).
import { register } from 'tsx/esm/api';

register();
await import('./remote-worker-thread.ts');
