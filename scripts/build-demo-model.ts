/**
 * Writes the demo embedding model into a models directory:
 *
 *   node --import tsx scripts/build-demo-model.ts [outDir=models]
 *
 * → <outDir>/cairn-demo-conv.onnx and <outDir>/cairn-demo-conv.json. The model is built in code
 * (src/embed/demo-model.ts) with fixed seeded weights, so nothing is downloaded and every run writes
 * the same bytes.
 */
import { createHash } from 'node:crypto';
import { mkdir, writeFile } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import { buildDemoModel } from '../src/embed/demo-model.js';

const outDir = resolve(process.argv[2] ?? 'models');
const { onnx, description } = buildDemoModel();
await mkdir(outDir, { recursive: true });
const onnxPath = join(outDir, description.file);
const jsonPath = join(outDir, `${description.name}.json`);
await writeFile(onnxPath, onnx);
await writeFile(jsonPath, JSON.stringify(description, null, 2) + '\n');
const sha256 = createHash('sha256').update(onnx).digest('hex');
console.log(`wrote ${onnxPath} (${onnx.length} bytes, sha256 ${sha256})`);
console.log(`wrote ${jsonPath}`);
