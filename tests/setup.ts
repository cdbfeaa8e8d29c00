/**
 * Test setup: property tests (fast-check) run with a fixed seed so that CI is repeatable. To explore new
 * cases locally, run with FC_SEED=<number> (or FC_SEED=random).
 */
import fc from 'fast-check';

const requested = process.env.FC_SEED;
const seed = requested === 'random' ? Date.now() : requested ? Number(requested) : 20261201;
fc.configureGlobal({ seed });
