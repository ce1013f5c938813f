import onnxProto from 'onnx-proto';

/**
 * Builds ONNX models in code: the compute graphs (onnx-graphs.ts), the demo embedding model and
 * test fixtures. Opset 17 (IR 8, the newest IR onnx-proto 8 knows): ReduceSum takes axes as an
 * input (≥ 13) but ReduceSumSquare/ReduceMin still take them as an attribute (input only from 18),
 * Shape has start/end (≥ 15).
 */
const { onnx } = onnxProto;
type INode = onnxProto.onnx.INodeProto;
type IAttr = onnxProto.onnx.IAttributeProto;
type ITensor = onnxProto.onnx.ITensorProto;
type IValueInfo = onnxProto.onnx.IValueInfoProto;

export const OPSET = 17;
export const IR_VERSION = 8;
export const DataType = onnx.TensorProto.DataType;
const A = onnx.AttributeProto.AttributeType;

export type Dim = string | number;

/**
 * Attributes always carry their type: protobufjs does not infer it from the field set, and ORT
 * refuses an untyped attribute ("Field 'type' of 'attr' is required"); a float given to `i` or an
 * int given to `f` would be silently truncated or zero.
 */
export const attr = {
  f: (name: string, f: number): IAttr => ({ name, type: A.FLOAT, f }),
  i: (name: string, i: number): IAttr => ({ name, type: A.INT, i }),
  ints: (name: string, ints: number[]): IAttr => ({ name, type: A.INTS, ints }),
  t: (name: string, t: ITensor): IAttr => ({ name, type: A.TENSOR, t }),
};

export class OnnxGraphBuilder {
  private readonly nodes: INode[] = [];
  private readonly inits: ITensor[] = [];
  private readonly inputs: IValueInfo[] = [];
  private readonly outputs: IValueInfo[] = [];
  private seq = 0;

  input(name: string, elemType: number, dims: Dim[]): string {
    this.inputs.push(valueInfo(name, elemType, dims));
    return name;
  }

  /**
   * Declares a graph output. With `from`, the producer's output is renamed instead of appending an
   * Identity, which ORT would run as one more full copy of e.g. the n×k distance matrix.
   */
  output(name: string, elemType: number, dims: Dim[], from?: string): void {
    if (from !== undefined) {
      for (const node of this.nodes) {
        node.input = node.input?.map((v) => (v === from ? name : v));
        node.output = node.output?.map((v) => (v === from ? name : v));
      }
    }
    this.outputs.push(valueInfo(name, elemType, dims));
  }

  /** One node; `output` names its result (default: a fresh name). */
  op(opType: string, input: string[], attribute: IAttr[] = [], output = `${opType.toLowerCase()}_${this.seq++}`): string {
    return this.opN(opType, input, attribute, [output])[0];
  }

  opN(opType: string, input: string[], attribute: IAttr[], output: string[]): string[] {
    this.nodes.push({ opType, input, output, attribute, name: output[0] });
    return output;
  }

  /**
   * A float32 constant (a scalar when dims = []). A Float32Array goes in as its raw little-endian
   * bytes, so the file holds exactly the float32 numbers the caller has (a plain-TS reference of
   * the model can use the same array).
   */
  floats(values: number[] | Float32Array, dims: number[] = [values.length], name = `c_${this.seq++}`): string {
    if (values instanceof Float32Array) {
      const bytes = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
      this.inits.push({ name, dataType: DataType.FLOAT, dims, rawData: Uint8Array.from(bytes) });
    } else {
      this.inits.push({ name, dataType: DataType.FLOAT, dims, floatData: values });
    }
    return name;
  }

  /** A 1-D int64 constant. */
  int64s(values: number[], name = `c_${this.seq++}`): string {
    this.inits.push({ name, dataType: DataType.INT64, dims: [values.length], int64Data: values });
    return name;
  }

  encode(graphName: string): Uint8Array {
    const graph = { name: graphName, node: this.nodes, initializer: this.inits, input: this.inputs, output: this.outputs };
    const opsetImport = [{ domain: '', version: OPSET }];
    return onnx.ModelProto.encode(onnx.ModelProto.create({ irVersion: IR_VERSION, producerName: 'cairn', opsetImport, graph })).finish();
  }
}

function valueInfo(name: string, elemType: number, dims: Dim[]): IValueInfo {
  const dim = dims.map((v) => (typeof v === 'number' ? { dimValue: v } : { dimParam: v }));
  return { name, type: { tensorType: { elemType, shape: { dim } } } };
}
