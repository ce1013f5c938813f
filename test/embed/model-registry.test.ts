import { writeFile } from 'node:fs/promises';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Rng } from '../../src/core/random.js';
import { buildDemoModel } from '../../src/embed/demo-model.js';
import { ModelRegistry, type ModelEntry } from '../../src/embed/model-registry.js';
import { argMaxModel, expectCode, flattenModel, nanModel, scratchDir, tinyDescription, writeModel } from './embed-fixtures.js';

/** Captures what the registry logs, to check that invalid models are reported, not thrown. */
function recordingLog() {
  const lines: Array<{ level: string; obj: Record<string, unknown> }> = [];
  const at = (level: string) => (obj: Record<string, unknown>) => void lines.push({ level, obj });
  return { lines, log: { info: at('info'), warn: at('warn') } as unknown as Parameters<typeof ModelRegistry.load>[1] };
}

describe('model registry', () => {
  const { onnx, description: demo } = buildDemoModel();
  let scratch: Awaited<ReturnType<typeof scratchDir>>;
  let registry: ModelRegistry;
  let logged: ReturnType<typeof recordingLog>['lines'];
  const entry = (name: string): ModelEntry => {
    const found = registry.list().find((m) => m.name === name);
    expect(found, `model ${name} is listed`).toBeDefined();
    return found!;
  };

  beforeAll(async () => {
    scratch = await scratchDir('cairn-models-');
    const dir = scratch.dir;
    await writeModel(dir, demo, onnx);
    // Several descriptions may share one .onnx file; each is validated against it.
    await writeModel(dir, { ...demo, name: 'wrong-input-name', input: { ...demo.input, name: 'pixels' } });
    await writeModel(dir, { ...demo, name: 'wrong-size', input: { ...demo.input, size: 32 } });
    await writeModel(dir, { ...demo, name: 'wrong-channels', input: { ...demo.input, channels: 'gray', mean: [0.5], std: [0.25] } });
    await writeModel(dir, { ...demo, name: 'wrong-dim', output: { ...demo.output, dim: 32 } });
    await writeModel(dir, { ...demo, name: 'wrong-output', output: { ...demo.output, name: 'features' } });
    await writeModel(dir, { ...demo, name: 'no-file', file: 'absent.onnx' });
    await writeModel(dir, { ...demo, name: 'bad-schema', input: { ...demo.input, std: [0.25, 0, 0.25] } });
    // A description whose name is not its file name (names must be unique; file names are).
    await writeFile(join(dir, 'renamed.json'), JSON.stringify({ ...demo, name: 'other-name' }));
    await writeFile(join(dir, 'malformed.json'), '{ "name": "malformed", ');
    const rng = new Rng(3);
    await writeModel(dir, { ...demo, name: 'corrupt', file: 'corrupt.onnx' }, Uint8Array.from({ length: 4096 }, () => rng.int(256)));
    await writeModel(dir, tinyDescription('int-output', { name: 'label', pooling: 'flatten', dim: 8 }), argMaxModel());
    await writeModel(dir, tinyDescription('nan-output', { name: 'vector', pooling: 'none', dim: 64 }), nanModel());
    await writeModel(dir, tinyDescription('fixed-batch', { name: 'vector', pooling: 'none', dim: 64 }), flattenModel(3));
    await writeFile(join(dir, 'notes.txt'), 'not a model');
    const { lines, log } = recordingLog();
    logged = lines;
    registry = await ModelRegistry.load(dir, log);
  });
  afterAll(() => scratch.cleanup());

  it('accepts the demo model and records its SHA-256', () => {
    const m = registry.get('cairn-demo-conv');
    expect(m.status).toBe('ready');
    expect(m.description).toEqual(demo);
    expect(m.sha256).toMatch(/^[0-9a-f]{64}$/);
    expect(m.fixedBatch).toBeNull();
    expect(entry('cairn-demo-conv')).toEqual({ name: 'cairn-demo-conv', status: 'ready', error: null, description: demo, sha256: m.sha256 });
  });

  it('lists every description file, sorted, without server paths', () => {
    const names = registry.list().map((m) => m.name);
    expect(names).toEqual([...names].sort());
    expect(names).not.toContain('notes');
    expect(names).toHaveLength(14);
    expect(JSON.stringify(registry.list())).not.toContain(scratch.dir);
  });

  it.each([
    ['no-file', 'MODEL_FILE_MISSING'],
    ['malformed', 'MODEL_BAD_DESCRIPTION'],
    ['bad-schema', 'MODEL_BAD_DESCRIPTION'],
    ['renamed', 'MODEL_BAD_DESCRIPTION'],
    ['corrupt', 'MODEL_LOAD_FAILED'],
    ['wrong-input-name', 'MODEL_INPUT_MISMATCH'],
    ['wrong-size', 'MODEL_INPUT_MISMATCH'],
    ['wrong-channels', 'MODEL_INPUT_MISMATCH'],
    ['wrong-output', 'MODEL_OUTPUT_MISSING'],
    ['int-output', 'MODEL_OUTPUT_NOT_FLOAT'],
    ['wrong-dim', 'MODEL_OUTPUT_DIM_MISMATCH'],
    ['nan-output', 'EMBEDDING_NON_FINITE'],
  ])('lists %s as invalid with %s, and logs it as a warning', (name, code) => {
    const m = entry(name);
    expect(m.status).toBe('invalid');
    expect(m.error?.code).toBe(code);
    expect(m.error?.message.length).toBeGreaterThan(10);
    expect(logged.some((l) => l.level === 'warn' && l.obj.model === name)).toBe(true);
  });

  it('says why in the message: the wrong dim names both lengths, the schema violation names the field', () => {
    expect(entry('wrong-dim').error?.message).toMatch(/64.*32/);
    expect(entry('bad-schema').error?.message).toContain('input.std');
    expect(entry('bad-schema').description).toBeNull();
    expect(entry('no-file').sha256).toBeNull();
  });

  it('keeps a batch size fixed in the ONNX input, and passes the probe at that size', () => {
    const m = registry.get('fixed-batch');
    expect(m.fixedBatch).toBe(3);
    expect(m.description.batchSize).toBe(32);
  });

  it('get() of an unknown name throws MODEL_NOT_FOUND (404)', async () => {
    const err = await expectCode(() => registry.get('no-such-model'), 'MODEL_NOT_FOUND');
    expect(err.status).toBe(404);
  });

  it('get() of an invalid model throws MODEL_INVALID (422) carrying the validation error', async () => {
    const err = await expectCode(() => registry.get('wrong-dim'), 'MODEL_INVALID');
    expect(err.status).toBe(422);
    expect(err.details.reason).toMatchObject({ code: 'MODEL_OUTPUT_DIM_MISMATCH' });
  });

  it('a missing models directory gives an empty registry and an info line (embedding is optional), not an exception', async () => {
    const { lines, log } = recordingLog();
    const empty = await ModelRegistry.load(join(scratch.dir, 'nope'), log);
    expect(empty.list()).toEqual([]);
    expect(lines.map((l) => l.level)).toEqual(['info']);
  });

  it('an unreadable models path (a file, not a folder) gives an empty registry and a warning', async () => {
    const { lines, log } = recordingLog();
    const file = join(scratch.dir, 'not-a-folder');
    writeFileSync(file, 'x');
    const empty = await ModelRegistry.load(file, log);
    expect(empty.list()).toEqual([]);
    expect(lines.map((l) => l.level)).toEqual(['warn']);
  });
});
