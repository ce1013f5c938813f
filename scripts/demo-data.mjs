#!/usr/bin/env node
// Demo data for cairn, from an invented scenario: machine parts photographed from above on a
// sorting line (see demo/README.md). Writes, deterministically from --seed:
//   <out>/parts-images.tar.gz   --count PNG / JPEG images in one folder per part kind (the labels)
//   <out>/parts-vectors.npy     --vectors × 32 float32 feature vectors of the same scenario
//   <out>/parts-vectors.csv     id,label for each vector row
// Usage: node scripts/demo-data.mjs [--count 600] [--vectors 5000] [--seed 7] [--out demo] [--no-vectors]
// The image generator is exported for scripts/bench/ingest-images.mjs.
import { createWriteStream, mkdirSync, statSync, writeFileSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { pipeline } from 'node:stream/promises';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { createGzip } from 'node:zlib';
import sharp from 'sharp';
import tar from 'tar-stream';

const IMAGE_SIDE = 128;
const DIMS = 32;

/** Part kinds and how often each comes down the line; pulleys and hinges are the rare ones. */
const KINDS = [
  ['gear', 0.24],
  ['bolt', 0.24],
  ['washer', 0.2],
  ['bracket', 0.15],
  ['spring', 0.13],
  ['pulley', 0.025],
  ['hinge', 0.015],
];
const FINISHES = [
  ['steel', [172, 176, 182]],
  ['brass', [196, 160, 70]],
  ['copper', [184, 112, 62]],
  ['black-oxide', [58, 58, 64]],
  ['blue-anodised', [62, 96, 176]],
];

/** mulberry32: small, fast and identical on every platform, so a seed gives the same files. */
export function prng(seed) {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

function gaussian(rand) {
  const u = Math.max(rand(), 1e-12);
  return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * rand());
}

function pick(rand, weighted) {
  let r = rand() * weighted.reduce((s, [, w]) => s + w, 0);
  for (const item of weighted) if ((r -= item[1]) <= 0) return item;
  return weighted[weighted.length - 1];
}

const rgb = ([r, g, b], k = 1) => `rgb(${[r, g, b].map((v) => Math.round(Math.min(255, v * k))).join(',')})`;

/** The SVG body of one part, centred on (0,0), roughly 80 px across at scale 1. */
function partShape(kind, colour, rand) {
  const fill = rgb(colour);
  const edge = rgb(colour, 0.7);
  const light = rgb(colour, 1.25);
  switch (kind) {
    case 'gear': {
      const teeth = 8 + Math.floor(rand() * 8);
      const points = [];
      for (let i = 0; i < teeth * 2; i++) {
        const r = i % 2 === 0 ? 40 : 32;
        const a = (Math.PI * i) / teeth;
        points.push(`${(r * Math.cos(a)).toFixed(1)},${(r * Math.sin(a)).toFixed(1)}`);
      }
      return `<polygon points="${points.join(' ')}" fill="${fill}" stroke="${edge}" stroke-width="2"/><circle r="10" fill="#000" fill-opacity="0.55"/>`;
    }
    case 'bolt':
      return `<rect x="-8" y="-10" width="16" height="52" fill="${fill}" stroke="${edge}"/>` +
        Array.from({ length: 8 }, (_, i) => `<line x1="-8" x2="8" y1="${-4 + i * 5}" y2="${-1 + i * 5}" stroke="${edge}" stroke-width="1.5"/>`).join('') +
        `<polygon points="-18,-10 -9,-26 9,-26 18,-10 9,6 -9,6" transform="translate(0,-14) scale(1,0.6)" fill="${light}" stroke="${edge}" stroke-width="2"/>`;
    case 'washer': {
      const hole = 10 + rand() * 10;
      return `<path d="M-36,0a36,36 0 1,0 72,0a36,36 0 1,0 -72,0zM-${hole},0a${hole},${hole} 0 1,1 ${2 * hole},0a${hole},${hole} 0 1,1 -${2 * hole},0z" fill-rule="evenodd" fill="${fill}" stroke="${edge}" stroke-width="2"/>`;
    }
    case 'bracket':
      return `<path d="M-36,-36h18v54h54v18h-72z" fill="${fill}" stroke="${edge}" stroke-width="2"/><circle cx="-27" cy="-22" r="5" fill="#111"/><circle cx="22" cy="27" r="5" fill="#111"/>`;
    case 'spring': {
      const turns = 6 + Math.floor(rand() * 5);
      const points = Array.from({ length: turns * 2 + 1 }, (_, i) => `${i % 2 === 0 ? -16 : 16},${(-40 + (80 * i) / (turns * 2)).toFixed(1)}`);
      return `<polyline points="${points.join(' ')}" fill="none" stroke="${fill}" stroke-width="5" stroke-linejoin="round"/>`;
    }
    case 'pulley':
      return `<circle r="40" fill="${fill}" stroke="${edge}" stroke-width="2"/><circle r="33" fill="none" stroke="${edge}" stroke-width="4"/>` +
        [0, 60, 120].map((a) => `<rect x="-30" y="-3" width="60" height="6" fill="${edge}" transform="rotate(${a})"/>`).join('') +
        `<circle r="8" fill="#111"/>`;
    default: // hinge
      return `<rect x="-38" y="-24" width="34" height="48" fill="${fill}" stroke="${edge}" stroke-width="2"/><rect x="4" y="-24" width="34" height="48" fill="${fill}" stroke="${edge}" stroke-width="2"/>` +
        [-16, 0, 16].map((y) => `<rect x="-5" y="${y - 7}" width="10" height="14" rx="4" fill="${light}" stroke="${edge}"/>`).join('');
  }
}

/** Draws one picture's parameters from `rand` (in order, so the sequence is fixed by the seed). */
function drawPart(rand, index) {
  const [kind] = pick(rand, KINDS);
  const [finish, colour] = FINISHES[Math.floor(rand() * FINISHES.length)];
  const belt = 70 + Math.floor(rand() * 40);
  return {
    index,
    kind,
    finish,
    colour,
    belt,
    angle: rand() * 360,
    scale: 0.6 + rand() * 0.45,
    dx: (rand() - 0.5) * 24,
    dy: (rand() - 0.5) * 24,
    lightX: 20 + rand() * 88,
    lightY: 20 + rand() * 88,
    jpeg: rand() < 0.7,
    shapeSeed: Math.floor(rand() * 2 ** 31),
    noiseSeed: Math.floor(rand() * 2 ** 31),
  };
}

/** Renders a part on a belt background with a light spot, a shadow and sensor noise. */
async function renderPart(part) {
  const shape = partShape(part.kind, part.colour, prng(part.shapeSeed));
  const c = IMAGE_SIDE / 2;
  const place = (ox) => `translate(${c + part.dx + ox},${c + part.dy + ox}) rotate(${part.angle.toFixed(1)}) scale(${part.scale.toFixed(3)})`;
  const svg = `<svg xmlns="http://www.w3.org/2000/svg" width="${IMAGE_SIDE}" height="${IMAGE_SIDE}">
<defs><radialGradient id="l" cx="${part.lightX}" cy="${part.lightY}" r="110" gradientUnits="userSpaceOnUse"><stop offset="0" stop-color="#fff" stop-opacity="0.28"/><stop offset="1" stop-color="#000" stop-opacity="0.25"/></radialGradient></defs>
<rect width="100%" height="100%" fill="${rgb([part.belt, part.belt, part.belt + 6])}"/>
${Array.from({ length: 6 }, (_, i) => `<rect y="${i * 22 + 4}" width="100%" height="3" fill="#000" fill-opacity="0.08"/>`).join('')}
<g transform="${place(4)}" opacity="0.35" fill="#000" stroke="#000">${shape.replace(/fill="(?!none)[^"]*"|stroke="[^"]*"/g, '')}</g>
<g transform="${place(0)}">${shape}</g>
<rect width="100%" height="100%" fill="url(#l)"/>
</svg>`;
  const { data, info } = await sharp(Buffer.from(svg)).removeAlpha().raw().toBuffer({ resolveWithObject: true });
  const rand = prng(part.noiseSeed);
  for (let i = 0; i < data.length; i++) data[i] = Math.max(0, Math.min(255, data[i] + gaussian(rand) * 4));
  const image = sharp(data, { raw: { width: info.width, height: info.height, channels: info.channels } });
  return part.jpeg ? image.jpeg({ quality: 85 }).toBuffer() : image.png().toBuffer();
}

/** Writes `count` pictures as a tar.gz with one folder per kind. Returns the count per kind. */
export async function writePartsArchive(path, count, seed) {
  const rand = prng(seed);
  const pack = tar.pack();
  const done = pipeline(pack, createGzip(), createWriteStream(path));
  const perKind = {};
  // Rendering overlaps in small groups; entries still go into the archive in index order.
  for (let start = 0; start < count; start += 8) {
    const parts = Array.from({ length: Math.min(8, count - start) }, (_, i) => drawPart(rand, start + i));
    const images = await Promise.all(parts.map(renderPart));
    for (let i = 0; i < parts.length; i++) {
      const p = parts[i];
      const name = `${p.kind}/${p.kind}-${String(p.index).padStart(5, '0')}-${p.finish}.${p.jpeg ? 'jpg' : 'png'}`;
      await new Promise((ok, fail) => pack.entry({ name, mtime: new Date(0) }, images[i], (err) => (err ? fail(err) : ok())));
      perKind[p.kind] = (perKind[p.kind] ?? 0) + 1;
    }
  }
  pack.finalize();
  await done;
  return perKind;
}

/**
 * Feature vectors as an upstream model might give them: a centre per kind, an offset per
 * finish, a size direction, and noise. Returns the npy bytes and the id,label CSV.
 */
export function makePartsVectors(rows, seed) {
  const rand = prng(seed ^ 0x5eed);
  const centre = () => Float64Array.from({ length: DIMS }, () => gaussian(rand));
  const kindCentres = KINDS.map(() => centre().map((v) => v * 3));
  const finishOffsets = FINISHES.map(() => centre().map((v) => v * 0.8));
  const sizeAxis = centre();
  const data = new Float32Array(rows * DIMS);
  const lines = ['id,label'];
  for (let r = 0; r < rows; r++) {
    const kind = KINDS.indexOf(pick(rand, KINDS));
    const finish = Math.floor(rand() * FINISHES.length);
    const size = rand() - 0.5;
    for (let d = 0; d < DIMS; d++) {
      data[r * DIMS + d] = kindCentres[kind][d] + finishOffsets[finish][d] + size * sizeAxis[d] + 0.45 * gaussian(rand);
    }
    lines.push(`part-${String(r).padStart(5, '0')},${KINDS[kind][0]}`);
  }
  let header = `{'descr': '<f4', 'fortran_order': False, 'shape': (${rows}, ${DIMS}), }`;
  header += ' '.repeat((64 - ((10 + header.length + 1) % 64)) % 64) + '\n';
  const prefix = Buffer.alloc(10);
  prefix.write('\x93NUMPY', 0, 'latin1');
  prefix.set([1, 0], 6);
  prefix.writeUInt16LE(header.length, 8);
  const npy = Buffer.concat([prefix, Buffer.from(header, 'latin1'), Buffer.from(data.buffer)]);
  return { npy, csv: lines.join('\n') + '\n' };
}

function parseArgs(argv) {
  const args = { count: 600, vectors: 5000, seed: 7, out: resolve(dirname(fileURLToPath(import.meta.url)), '..', 'demo'), withVectors: true };
  for (let i = 0; i < argv.length; i++) {
    const flag = argv[i];
    if (flag === '--no-vectors') args.withVectors = false;
    else if (flag === '--out') args.out = resolve(argv[++i]);
    else if (['--count', '--vectors', '--seed'].includes(flag)) {
      const value = Number(argv[++i]);
      if (!Number.isInteger(value) || value < 1) throw new Error(`${flag} needs a positive integer`);
      args[flag.slice(2)] = value;
    } else throw new Error(`unknown option ${flag}`);
  }
  return args;
}

async function main() {
  const args = parseArgs(process.argv.slice(2));
  mkdirSync(args.out, { recursive: true });
  const size = (path) => `${(statSync(path).size / 1024 / 1024).toFixed(2)} MiB`;
  const archive = join(args.out, 'parts-images.tar.gz');
  const perKind = await writePartsArchive(archive, args.count, args.seed);
  console.log(`wrote ${archive} (${size(archive)}): ${args.count} images, ${IMAGE_SIDE}×${IMAGE_SIDE}, per kind ${JSON.stringify(perKind)}`);
  if (!args.withVectors) return;
  const { npy, csv } = makePartsVectors(args.vectors, args.seed);
  const npyPath = join(args.out, 'parts-vectors.npy');
  const csvPath = join(args.out, 'parts-vectors.csv');
  writeFileSync(npyPath, npy);
  writeFileSync(csvPath, csv);
  console.log(`wrote ${npyPath} (${size(npyPath)}): ${args.vectors} × ${DIMS} float32`);
  console.log(`wrote ${csvPath} (${size(csvPath)}): id,label per vector row`);
}

if (import.meta.url === pathToFileURL(process.argv[1] ?? '').href) {
  main().catch((err) => {
    console.error(err instanceof Error ? err.message : err);
    process.exit(1);
  });
}
