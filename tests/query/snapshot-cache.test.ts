import { describe, expect, it } from "vitest";
import { toColumns, type KeptColumns } from "~/query/columns";
import { SnapshotCache } from "~/query/snapshot-cache";

// The cache's contract (see snapshot-cache.ts): an entry answers only for the next_seq it was
// read at, and the least recently used entries go first once the kept records held pass the bound.

function columns(records: number): KeptColumns {
  const record = { src: new Uint8Array(16), dst: new Uint8Array(16), sport: 0, dport: 0, proto: 6, bytes: 1n, packets: 1n, start: null };
  return toColumns(Array.from({ length: records }, () => ({ weight: 1, record })));
}

describe("SnapshotCache", () => {
  it("answers for the same next_seq only, and drops a stale entry", () => {
    const cache = new SnapshotCache(100);
    const c = columns(10);
    cache.set(1, 5, c);
    expect(cache.get(1, 5)).toBe(c);
    expect(cache.get(1, 6)).toBeUndefined(); // a record entered since: the kept set may differ
    expect(cache.get(1, 5)).toBeUndefined();
    expect(cache.records).toBe(0);
  });

  it("drops the least recently used entries beyond the bound on kept records", () => {
    const cache = new SnapshotCache(30);
    cache.set(1, 0, columns(10));
    cache.set(2, 0, columns(10));
    cache.set(3, 0, columns(10));
    cache.get(1, 0); // 1 is now the most recently used, 2 the least
    cache.set(4, 0, columns(10));
    expect(cache.get(2, 0)).toBeUndefined();
    expect([1, 3, 4].map((id) => cache.get(id, 0)?.length)).toEqual([10, 10, 10]);
    expect(cache.records).toBe(30);
    expect(cache.size).toBe(3);
  });

  it("replaces an entry of the same reservoir and never holds one larger than the bound", () => {
    const cache = new SnapshotCache(30);
    cache.set(1, 0, columns(10));
    cache.set(1, 1, columns(20));
    expect(cache.records).toBe(20);
    expect(cache.get(1, 1)?.length).toBe(20);
    cache.set(2, 0, columns(31));
    expect(cache.get(2, 0)).toBeUndefined();
    expect(cache.records).toBe(20);
  });
});
