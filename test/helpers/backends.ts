import type { ComputeBackend } from '../../src/compute/backend.js';
import { OnnxBackend } from '../../src/compute/onnx-backend.js';

/** The default backend as the service runs it (ONNX graphs, tiny shapes on the reference path). */
export async function defaultBackend(): Promise<ComputeBackend> {
  return OnnxBackend.create();
}
