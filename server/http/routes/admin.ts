/**
 * POST /v1/admin/backup (admin key for every experiment): an online backup of the database while the service
 * keeps ingesting (SQLite's backup API through server/store/sqlite/backup.ts).
 *
 * Where it writes: only into the configured backup folder (SPLITBALLOT_BACKUP_DIR, default "backups" beside
 * the database). The request may name the file (`name`: a plain file name ending in .db, no folders); otherwise
 * the service names it splitballot-<UTC time>.db. A path from the network is never used: the folder is fixed by
 * whoever runs the service, and the name cannot contain a separator or start with a dot. An existing file is
 * never overwritten (409). One backup at a time (a second request meanwhile gets 503 with Retry-After).
 */
import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import type { FastifyInstance } from 'fastify';
import type { ZodTypeProvider } from 'fastify-type-provider-zod';
import { z } from 'zod';
import type { BackupResult } from '../../store/types.js';
import type { Store } from '../../store/types.js';
import type { ServiceMetrics } from '../metrics.js';
import { ProblemError } from '../../errors.js';
import { problems } from '../../schemas/common.js';

export const BACKUP_NAME_PATTERN = /^[A-Za-z0-9][A-Za-z0-9._-]{0,100}\.db$/;

export interface AdminRouteOptions {
  store: Store;
  /** Copy the live database to this absolute path; absent when the store cannot be backed up online. */
  backup?: (destination: string) => Promise<BackupResult>;
  /** The backup folder (absolute). */
  backupDir?: string;
  metrics?: ServiceMetrics;
  /** Why this store takes no online backup (PostgreSQL: its own tools), answered as the problem's detail. */
  backupRefusal?: string;
}

const BackupRequestSchema = z
  .object({
    name: z
      .string()
      .regex(BACKUP_NAME_PATTERN, 'must be a plain file name ending in .db (letters, digits, ".", "_", "-"; no folders), at most 104 characters')
      .optional()
      .describe('File name inside the backup folder; default splitballot-<UTC time>.db'),
  })
  .strict()
  .meta({ id: 'BackupRequest', example: { name: 'before-wave-2.db' } });

const BackupResultSchema = z
  .object({
    file: z.string().describe('File name inside the backup folder (SPLITBALLOT_BACKUP_DIR)'),
    bytes: z.number().int(),
    pages: z.number().int(),
    durationMs: z.number().int(),
    startedAt: z.string(),
    completedAt: z.string(),
  })
  .meta({
    id: 'BackupResult',
    example: { file: 'splitballot-20270301T120000Z.db', bytes: 1048576, pages: 256, durationMs: 41, startedAt: '2027-03-01T12:00:00.000Z', completedAt: '2027-03-01T12:00:00.041Z' },
  });

function defaultName(now: Date): string {
  return `splitballot-${now.toISOString().replace(/[-:]/g, '').replace(/\.(\d+)Z$/, '$1Z')}.db`;
}

export async function adminRoutes(base: FastifyInstance, opts: AdminRouteOptions): Promise<void> {
  const app = base.withTypeProvider<ZodTypeProvider>();
  let running: string | null = null;

  app.post(
    '/v1/admin/backup',
    {
      config: { access: { scopes: ['admin'], allowExperimentLimited: false } },
      schema: {
        tags: ['admin'],
        summary: 'Take an online backup of the database into the backup folder',
        description:
          'Copies the database with SQLite\'s online backup API while ingest continues; the copy holds every response acknowledged ' +
          'before the request started. The file is written only inside the folder configured by SPLITBALLOT_BACKUP_DIR (default ' +
          '"backups" beside the database), as "name" or splitballot-<UTC time>.db; an existing file is never overwritten. Check a ' +
          'backup with `splitballot check --db FILE`; restore it with `splitballot restore FILE` while the service is stopped.',
        body: BackupRequestSchema.nullish(),
        response: { 201: BackupResultSchema, ...problems(400, 401, 403, 409, 413, 415, 422, 500, 503) },
      },
    },
    async (request, reply) => {
      if (opts.backupRefusal) throw new ProblemError('unavailable', opts.backupRefusal);
      if (!opts.backup || !opts.backupDir) throw new ProblemError('unavailable', 'This store cannot be backed up online.');
      if (running !== null) {
        throw new ProblemError('unavailable', `A backup (${running}) is already running; try again when it has finished.`, {
          headers: { 'retry-after': '5' },
        });
      }
      const started = new Date();
      const name = request.body?.name ?? defaultName(started);
      const destination = join(opts.backupDir, name);
      running = name;
      try {
        mkdirSync(opts.backupDir, { recursive: true, mode: 0o700 });
        let result: BackupResult;
        try {
          result = await opts.backup(destination);
        } catch (err) {
          if ((err as Error).name === 'BackupError') throw new ProblemError('already-exists', `A backup named ${name} already exists; choose another name.`);
          throw err;
        }
        opts.metrics?.recordBackup(true);
        const completed = new Date();
        request.log.info({ file: name, bytes: result.bytes, pages: result.pages, durationMs: result.durationMs }, 'backup written');
        return reply.code(201).send({
          file: name,
          bytes: result.bytes,
          pages: result.pages,
          durationMs: result.durationMs,
          startedAt: started.toISOString(),
          completedAt: completed.toISOString(),
        });
      } catch (err) {
        if (!(err instanceof ProblemError)) opts.metrics?.recordBackup(false);
        throw err;
      } finally {
        running = null;
      }
    },
  );
}
