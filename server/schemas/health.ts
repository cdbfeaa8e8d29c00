import { z } from 'zod';

export const HealthSchema = z.object({ status: z.literal('ok') }).meta({ id: 'Health' });
export const ReadySchema = z.object({ status: z.literal('ready'), migrations: z.number().int() }).meta({ id: 'Ready' });
