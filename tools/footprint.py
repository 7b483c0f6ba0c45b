#!/usr/bin/python3
"""Code the gyre runtime adds to a program, from two builds of tests/runtime/footprint_probe.c.

The probe linked with the static runtime and the same program without the runtime calls
(-DGYRE_FOOTPRINT_BASELINE) are compared by their loaded, file-backed ELF sections (code, read-only
data, initialised data, unwind tables: SHF_ALLOC and not SHT_NOBITS, ELF-64 gABI), which is what a
stripped static link adds to the file and to memory; symbol tables and debug sections do not count.
The C and C++ standard libraries (and ICU) stay shared libraries, as in a normal application.

    tools/footprint.py PROBE BASELINE [--budget-kib N] [--label NAME]

With --budget-kib it exits 1 when the runtime's share exceeds the budget (the ctest
"runtime: code size stays under the budget" in tests/runtime/extra.cmake).
"""
import argparse
import struct
import sys

SHF_ALLOC = 0x2
SHT_NOBITS = 8


def loaded_bytes(path):
    """(file-backed, zero-filled) bytes of the SHF_ALLOC sections of an ELF-64 file."""
    with open(path, "rb") as f:
        data = f.read()
    if data[:4] != b"\x7fELF" or data[4] != 2:
        raise SystemExit(f"footprint: {path}: not an ELF-64 file")
    endian = "<" if data[5] == 1 else ">"
    shoff, = struct.unpack_from(endian + "Q", data, 0x28)
    shentsize, shnum = struct.unpack_from(endian + "HH", data, 0x3A)
    backed = zero = 0
    for i in range(shnum):
        off = shoff + i * shentsize
        _name, sh_type, flags = struct.unpack_from(endian + "IIQ", data, off)
        size, = struct.unpack_from(endian + "Q", data, off + 0x20)
        if flags & SHF_ALLOC:
            if sh_type == SHT_NOBITS:
                zero += size
            else:
                backed += size
    return backed, zero


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("probe")
    ap.add_argument("baseline")
    ap.add_argument("--budget-kib", type=float)
    ap.add_argument("--label", default="runtime")
    a = ap.parse_args()
    p_backed, p_zero = loaded_bytes(a.probe)
    b_backed, b_zero = loaded_bytes(a.baseline)
    kib = (p_backed - b_backed) / 1024.0
    print(f"{a.label}: code + data added {kib:.1f} KiB ({p_backed - b_backed} bytes), "
          f"zero-initialised data {p_zero - b_zero} bytes")
    if a.budget_kib is not None and kib > a.budget_kib:
        print(f"footprint: {a.label} adds {kib:.1f} KiB, over the budget of {a.budget_kib:g} KiB", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
