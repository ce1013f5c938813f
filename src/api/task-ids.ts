import { randomBytes } from 'node:crypto';

/** New resource ids: a kind prefix and 64 random bits (hex), so ids are unguessable and never collide in practice. */
export function newId(prefix: 'ds' | 'job'): string {
  return `${prefix}_${randomBytes(8).toString('hex')}`;
}
