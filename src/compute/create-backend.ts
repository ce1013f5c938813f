import { requireArg } from '../errors.js';
import type { ComputeBackend } from './backend.js';
import { OnnxBackend, type OnnxBackendOptions } from './onnx-backend.js';
import { ReferenceBackend } from './reference-backend.js';

export type BackendKind = 'onnx' | 'reference';

/** The one place that maps a configured backend name to an instance; options apply to 'onnx' only. */
export async function createBackend(kind: BackendKind, opts: OnnxBackendOptions = {}): Promise<ComputeBackend> {
  requireArg(kind === 'onnx' || kind === 'reference', 'backend', "'onnx' or 'reference'", kind);
  if (kind === 'reference') return new ReferenceBackend();
  return OnnxBackend.create(opts);
}
