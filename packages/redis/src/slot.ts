/**
 * Redis Cluster key slots, computed here so a batch can be split by slot before it is sent
 * (an ioredis cluster pipeline whose keys live on two nodes is refused before anything is sent).
 * Source: Redis Cluster specification, "Key distribution model" and "Hash tags"
 * (HASH_SLOT = CRC16(key) mod 16384, CRC16-CCITT/XMODEM, only the `{…}` part when it is not empty).
 */

const TABLE = (() => {
  const t = new Uint16Array(256);
  for (let i = 0; i < 256; i++) {
    let crc = i << 8;
    for (let b = 0; b < 8; b++) crc = crc & 0x8000 ? ((crc << 1) ^ 0x1021) & 0xffff : (crc << 1) & 0xffff;
    t[i] = crc;
  }
  return t;
})();

/** CRC16-XMODEM (polynomial 0x1021, initial value 0) of some bytes. */
export function crc16(bytes: Uint8Array): number {
  let crc = 0;
  for (let i = 0; i < bytes.length; i++)
    crc = ((crc << 8) & 0xffff) ^ TABLE[((crc >> 8) ^ bytes[i]!) & 0xff]!;
  return crc;
}

/** The cluster slot (0–16383) of a key, honouring `{hash tags}`. */
export function keySlot(key: string | Buffer | number): number {
  const bytes = Buffer.isBuffer(key) ? key : Buffer.from(String(key));
  const open = bytes.indexOf(0x7b); // '{'
  if (open !== -1) {
    const close = bytes.indexOf(0x7d, open + 1); // '}'
    if (close > open + 1) return crc16(bytes.subarray(open + 1, close)) & 16383;
  }
  return crc16(bytes) & 16383;
}
