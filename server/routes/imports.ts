/** Placeholder: this route group is being written (see the issue that names it). Registered by server/app.ts. */
import type { FastifyInstance } from 'fastify';
import type { Store } from '../db/types.js';

export async function importRoutes(_app: FastifyInstance, _opts: { store: Store }): Promise<void> {}
