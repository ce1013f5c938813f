import { describe, expect, it } from 'vitest';
import { demoModelDescription } from '../../src/embed/demo-model.js';
import { modelDescriptionSchema, parseModelDescription } from '../../src/embed/model-description.js';

describe('model description', () => {
  const { normalize: _n, batchSize: _b, ...minimal } = demoModelDescription();

  it('fills the documented defaults: normalize false, batchSize 32', () => {
    const parsed = parseModelDescription(minimal);
    expect(parsed.ok && parsed.description).toMatchObject({ normalize: false, batchSize: 32 });
  });

  it.each([
    ['a name with upper case', { name: 'Demo' }, 'name'],
    ['a file outside the models directory', { file: '../elsewhere.onnx' }, 'file'],
    ['a file that is not .onnx', { file: 'model.bin' }, 'file'],
    ['two mean values', { input: { ...minimal.input, mean: [0.5, 0.5] } }, 'input.mean'],
    ['a zero std', { input: { ...minimal.input, std: [0] } }, 'input.std'],
    ['three means for a gray model', { input: { ...minimal.input, channels: 'gray' } }, 'input.mean'],
    ['a size below 8', { input: { ...minimal.input, size: 4 } }, 'input.size'],
    ['an unknown pooling', { output: { ...minimal.output, pooling: 'max' } }, 'output.pooling'],
    ['a misspelt key', { normalise: true }, '(root)'],
    ['batchSize 0', { batchSize: 0 }, 'batchSize'],
  ])('rejects %s, naming the field', (_what, change, field) => {
    const parsed = parseModelDescription({ ...minimal, ...change });
    expect(parsed.ok).toBe(false);
    if (!parsed.ok) expect(parsed.message).toContain(field);
  });

  it('documents every field and its default', () => {
    const shape = modelDescriptionSchema.shape;
    for (const [key, field] of Object.entries(shape)) expect(field.description, key).toBeTruthy();
    expect(shape.normalize.description).toContain('Default false');
    expect(shape.batchSize.description).toContain('Default 32');
  });
});
