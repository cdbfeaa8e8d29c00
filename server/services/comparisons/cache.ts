/**
 * The comparison service's cache: least recently used, bounded by an entry count and by an estimate of bytes (the
 * caller passes the estimate: twice the JSON length, UTF-16). O(1) per get and set (a Map keeps insertion order).
 */
interface CacheEntry<T> {
  value: T;
  bytes: number;
}

/** Least-recently-used cache bounded by entry count and by a byte estimate. */
export class LruCache<T> {
  private readonly map = new Map<string, CacheEntry<T>>();
  private bytes = 0;
  hits = 0;
  misses = 0;

  constructor(
    readonly maxEntries: number,
    readonly maxBytes: number,
  ) {}

  get(key: string): T | undefined {
    const e = this.map.get(key);
    if (!e) {
      this.misses++;
      return undefined;
    }
    this.hits++;
    this.map.delete(key);
    this.map.set(key, e);
    return e.value;
  }

  set(key: string, value: T, bytes: number): void {
    const old = this.map.get(key);
    if (old) {
      this.bytes -= old.bytes;
      this.map.delete(key);
    }
    if (bytes > this.maxBytes) return; // too large to keep at all
    this.map.set(key, { value, bytes });
    this.bytes += bytes;
    while (this.map.size > this.maxEntries || this.bytes > this.maxBytes) {
      const oldest = this.map.keys().next().value as string;
      this.bytes -= this.map.get(oldest)!.bytes;
      this.map.delete(oldest);
    }
  }

  get size(): number {
    return this.map.size;
  }

  get totalBytes(): number {
    return this.bytes;
  }

  clear(): void {
    this.map.clear();
    this.bytes = 0;
  }
}
