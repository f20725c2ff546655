// Kafka's default partitioning of keyed records, as the Java client does it: murmur2 of the key's
// UTF-8 bytes (seed 0x9747b28c), sign bit cleared, modulo the partition count. Used where Keelson
// picks a partition itself (partials go by node, not by their record key).
const encoder = new TextEncoder();

export function murmur2(data: Uint8Array): number {
  const m = 0x5bd1e995;
  const length = data.length;
  let h = (0x9747b28c ^ length) | 0;
  const whole = length & ~3;
  for (let i = 0; i < whole; i += 4) {
    let k = data[i]! | (data[i + 1]! << 8) | (data[i + 2]! << 16) | (data[i + 3]! << 24);
    k = Math.imul(k, m);
    k ^= k >>> 24;
    k = Math.imul(k, m);
    h = Math.imul(h, m) ^ k;
  }
  const tail = length & 3;
  if (tail === 3) h ^= data[whole + 2]! << 16;
  if (tail >= 2) h ^= data[whole + 1]! << 8;
  if (tail >= 1) h = Math.imul(h ^ data[whole]!, m);
  h ^= h >>> 13;
  h = Math.imul(h, m);
  h ^= h >>> 15;
  return h | 0;
}

export function javaPartition(key: string, partitions: number): number {
  return (murmur2(encoder.encode(key)) & 0x7fffffff) % partitions;
}
