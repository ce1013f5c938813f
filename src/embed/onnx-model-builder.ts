import onnxProto from 'onnx-proto';

/**
 * A minimal ModelProto writer for models built in code (the demo model, test fixtures), in the
 * conventions of src/compute/onnx-graphs.ts: opset 17, IR 8 (the newest IR onnx-proto 8 knows),
 * attributes always typed (ORT rejects an untyped attribute, and protobufjs does not infer it).
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

export const attr = {
  f: (name: string, f: number): IAttr => ({ name, type: A.FLOAT, f }),
  i: (name: string, i: number): IAttr => ({ name, type: A.INT, i }),
  ints: (name: string, ints: number[]): IAttr => ({ name, type: A.INTS, ints }),
};

export class OnnxModelBuilder {
  private readonly nodes: INode[] = [];
  private readonly inits: ITensor[] = [];
  private readonly inputs: IValueInfo[] = [];
  private readonly outputs: IValueInfo[] = [];
  private seq = 0;

  input(name: string, elemType: number, dims: Dim[]): string {
    this.inputs.push(valueInfo(name, elemType, dims));
    return name;
  }

  output(name: string, elemType: number, dims: Dim[]): void {
    this.outputs.push(valueInfo(name, elemType, dims));
  }

  /** One node; `output` names its result (default: a fresh name). */
  op(opType: string, input: string[], attribute: IAttr[] = [], output = `${opType.toLowerCase()}_${this.seq++}`): string {
    this.nodes.push({ opType, input, output: [output], attribute, name: output });
    return output;
  }

  /**
   * A float32 initializer. The values go in as raw little-endian bytes of a Float32Array, so the
   * file holds exactly the float32 numbers the caller has (a plain-TS reference can use the same).
   */
  floats(values: Float32Array, dims: number[], name = `w_${this.seq++}`): string {
    const bytes = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
    this.inits.push({ name, dataType: DataType.FLOAT, dims, rawData: Uint8Array.from(bytes) });
    return name;
  }

  int64s(values: number[], name = `i_${this.seq++}`): string {
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
