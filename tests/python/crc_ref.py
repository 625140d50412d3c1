"""Bit-by-bit CRC-32C and CRC-64/XZ from their definitions (reflected
polynomials 0x82F63B78 and 0xC96C5795D7870F42, init and final XOR all ones),
an implementation independent of Boost.CRC for the checkpoint checksum tests.
Reads hex strings (one per line) on stdin, prints "crc32c crc64" in hex."""
import sys


def crc_reflected(data, poly, width):
    mask = (1 << width) - 1
    crc = mask
    for byte in data:
        crc ^= byte
        for _ in range(8):
            crc = (crc >> 1) ^ poly if crc & 1 else crc >> 1
    return crc ^ mask


for line in sys.stdin:
    line = line.strip()
    data = bytes.fromhex(line)
    print("%08x %016x" % (crc_reflected(data, 0x82F63B78, 32),
                          crc_reflected(data, 0xC96C5795D7870F42, 64)))
