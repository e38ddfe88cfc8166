/**
 * SipHash-2-4, a keyed hash of short inputs (J.-P. Aumasson, D. J. Bernstein,
 * "SipHash: a fast short-input PRF", INDOCRYPT 2012), for coordinated priorities.
 *
 * Pure and isomorphic: no node:crypto, so the console computes the same draws in
 * the browser. No SipHash package is installed, so it is written here. Each
 * 64-bit word is held as two unsigned 32-bit halves rather than a BigInt: the
 * ingest path hashes every record, and BigInt arithmetic allocates on each step.
 */

// The state v0..v3 as (hi, lo) pairs, reused across calls (single-threaded).
const v = new Uint32Array(8);
const V0H = 0, V0L = 1, V1H = 2, V1L = 3, V2H = 4, V2L = 5, V3H = 6, V3L = 7;

/** v[a] += v[b] (mod 2^64). */
function add(a: number, b: number): void {
  const lo = v[a + 1] + v[b + 1];
  v[a] = v[a] + v[b] + (lo > 0xffffffff ? 1 : 0);
  v[a + 1] = lo;
}

/** v[a] ^= v[b]. */
function xor(a: number, b: number): void {
  v[a] ^= v[b];
  v[a + 1] ^= v[b + 1];
}

/** v[a] = rotl(v[a], n) for 0 < n < 32; rotation by 32 swaps the halves (rotl32). */
function rotl(a: number, n: number): void {
  const hi = v[a];
  const lo = v[a + 1];
  v[a] = (hi << n) | (lo >>> (32 - n));
  v[a + 1] = (lo << n) | (hi >>> (32 - n));
}

function rotl32(a: number): void {
  const hi = v[a];
  v[a] = v[a + 1];
  v[a + 1] = hi;
}

/** One SipRound (paper, §2, Figure 2). */
function sipRound(): void {
  add(V0H, V1H); rotl(V1H, 13); xor(V1H, V0H); rotl32(V0H);
  add(V2H, V3H); rotl(V3H, 16); xor(V3H, V2H);
  add(V0H, V3H); rotl(V3H, 21); xor(V3H, V0H);
  add(V2H, V1H); rotl(V1H, 17); xor(V1H, V2H); rotl32(V2H);
}

/** Little-endian 32-bit word of `bytes` at `at`. */
function le32(bytes: Uint8Array, at: number): number {
  return (bytes[at] | (bytes[at + 1] << 8) | (bytes[at + 2] << 16) | (bytes[at + 3] << 24)) >>> 0;
}

/** v3 ^= m; two rounds; v0 ^= m — the compression of one 8-byte word m = (mh, ml). */
function compress(mh: number, ml: number): void {
  v[V3H] ^= mh;
  v[V3L] ^= ml;
  sipRound();
  sipRound();
  v[V0H] ^= mh;
  v[V0L] ^= ml;
}

/**
 * SipHash-2-4 of `message` under a 16-byte `key`, as two unsigned 32-bit halves
 * of the 64-bit result (Aumasson & Bernstein, INDOCRYPT 2012, §2). The byte
 * form of the paper's test vectors is the little-endian encoding of `hi·2^32 + lo`.
 *
 * @example
 * const key = Uint8Array.from({ length: 16 }, (_, i) => i);
 * const message = Uint8Array.from({ length: 15 }, (_, i) => i);
 * sipHash24(key, message) // { hi: 0xa129ca61, lo: 0x49be45e5 }  (paper, Appendix A)
 */
export function sipHash24(key: Uint8Array, message: Uint8Array): { hi: number; lo: number } {
  if (key.length !== 16) throw new RangeError(`a SipHash key is 16 bytes, got ${key.length}`);
  const k0h = le32(key, 4), k0l = le32(key, 0), k1h = le32(key, 12), k1l = le32(key, 8);
  // Initialisation constants: "somepseudorandomlygeneratedbytes" (paper, §2).
  v[V0H] = k0h ^ 0x736f6d65; v[V0L] = k0l ^ 0x70736575;
  v[V1H] = k1h ^ 0x646f7261; v[V1L] = k1l ^ 0x6e646f6d;
  v[V2H] = k0h ^ 0x6c796765; v[V2L] = k0l ^ 0x6e657261;
  v[V3H] = k1h ^ 0x74656462; v[V3L] = k1l ^ 0x79746573;

  const length = message.length;
  const whole = length - (length % 8);
  for (let at = 0; at < whole; at += 8) compress(le32(message, at + 4), le32(message, at));

  // Last word: the 0–7 remaining bytes, and the length mod 256 in the top byte.
  let mh = (length & 0xff) << 24;
  let ml = 0;
  for (let i = whole; i < length; i++) {
    const shift = 8 * (i - whole);
    if (shift < 32) ml |= message[i] << shift;
    else mh |= message[i] << (shift - 32);
  }
  compress(mh >>> 0, ml >>> 0);

  v[V2L] ^= 0xff;
  sipRound();
  sipRound();
  sipRound();
  sipRound();
  return {
    hi: (v[V0H] ^ v[V1H] ^ v[V2H] ^ v[V3H]) >>> 0,
    lo: (v[V0L] ^ v[V1L] ^ v[V2L] ^ v[V3L]) >>> 0,
  };
}
