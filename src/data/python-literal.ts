/**
 * A parser for the Python literal subset that .npy headers use: dicts, tuples, lists, strings,
 * integers (with an optional Python 2 `L` suffix), True, False and None. The header is untrusted
 * input, so it is parsed, never evaluated; nesting is capped so a crafted header cannot overflow
 * the stack. Anything else (floats, calls, sets) is a syntax error.
 */
export type PyValue = string | number | boolean | null | PyValue[] | PyTuple | PyDict;
export class PyTuple {
  constructor(readonly items: PyValue[]) {}
}
export class PyDict {
  constructor(readonly entries: Map<string, PyValue>) {}
}

export class PySyntaxError extends Error {}

const MAX_DEPTH = 16;

/** Parses one literal that must fill `text` (surrounding whitespace allowed). */
export function parsePythonLiteral(text: string): PyValue {
  let pos = 0;

  const fail = (what: string): never => {
    throw new PySyntaxError(`${what} at offset ${pos}`);
  };
  const skipSpace = () => {
    while (pos < text.length && ' \t\r\n'.includes(text[pos])) pos++;
  };

  function value(depth: number): PyValue {
    if (depth > MAX_DEPTH) fail('nesting too deep');
    skipSpace();
    const c = text[pos];
    if (c === '{') return dict(depth);
    if (c === '(') return new PyTuple(sequence(')', depth));
    if (c === '[') return sequence(']', depth);
    if (c === "'" || c === '"') return string();
    if (c === '-' || c === '+' || (c >= '0' && c <= '9')) return integer();
    for (const [word, v] of [['True', true], ['False', false], ['None', null]] as const) {
      if (text.startsWith(word, pos) && !/[A-Za-z0-9_]/.test(text[pos + word.length] ?? '')) {
        pos += word.length;
        return v;
      }
    }
    return fail('unexpected character');
  }

  function dict(depth: number): PyDict {
    pos++; // '{'
    const entries = new Map<string, PyValue>();
    for (;;) {
      skipSpace();
      if (text[pos] === '}') break;
      const key = value(depth + 1);
      if (typeof key !== 'string') fail('dict key is not a string');
      skipSpace();
      if (text[pos] !== ':') fail("expected ':'");
      pos++;
      if (entries.has(key as string)) fail('duplicate dict key');
      entries.set(key as string, value(depth + 1));
      skipSpace();
      if (text[pos] === ',') pos++;
      else if (text[pos] !== '}') fail("expected ',' or '}'");
    }
    pos++;
    return new PyDict(entries);
  }

  function sequence(close: string, depth: number): PyValue[] {
    pos++; // '(' or '['
    const items: PyValue[] = [];
    for (;;) {
      skipSpace();
      if (text[pos] === close) break;
      items.push(value(depth + 1));
      skipSpace();
      if (text[pos] === ',') pos++;
      else if (text[pos] !== close) fail(`expected ',' or '${close}'`);
    }
    pos++;
    return items;
  }

  function string(): string {
    const quote = text[pos++];
    let out = '';
    for (;;) {
      if (pos >= text.length) fail('unterminated string');
      const c = text[pos++];
      if (c === quote) return out;
      if (c === '\n') fail('newline in string');
      if (c === '\\') {
        const e = text[pos++];
        const simple: Record<string, string> = { n: '\n', t: '\t', r: '\r', '\\': '\\', "'": "'", '"': '"', '0': '\0' };
        if (e === undefined || !(e in simple)) fail('unsupported escape');
        out += simple[e];
      } else {
        out += c;
      }
    }
  }

  function integer(): number {
    const match = /^[+-]?[0-9]+L?/.exec(text.slice(pos, pos + 40));
    if (!match) return fail('bad number');
    const digits = match[0].replace(/L$/, '');
    pos += match[0].length;
    if (/^[.eEjJxXoObB_]/.test(text[pos] ?? '')) fail('only integers are supported');
    const n = Number(digits);
    if (!Number.isSafeInteger(n)) fail('integer too large');
    return n;
  }

  const result = value(0);
  skipSpace();
  if (pos !== text.length) fail('trailing characters');
  return result;
}
