import fc from 'fast-check';

/**
 * CI runs the property suites with one fixed seed, so a red run is reproducible from the log and a
 * submission is not gated on a fresh random draw; locally each run draws new cases. FC_SEED (with
 * FC_PATH, as fast-check prints them on a failure) replays a given run anywhere.
 */
const CI_SEED = 20_261_201;

if (process.env.FC_SEED) fc.configureGlobal({ seed: Number(process.env.FC_SEED) });
else if (process.env.CI) fc.configureGlobal({ seed: CI_SEED });
