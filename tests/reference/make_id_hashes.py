#!/usr/bin/env python3
"""Generate tests/reference/id_hashes.json: XXH3-128 (seed 0) of ids, from the
Python `xxhash` package (bindings to the xxHash C library), for the id set's hash.

Run from the repository root:

    pip install xxhash
    python3 tests/reference/make_id_hashes.py

The ids are a few of the usual shapes plus pseudo-random bytes of every length
0..=80 (Python's `random` with a fixed seed, so the file is the same every run);
every length class of the algorithm (0, 1-3, 4-8, 9-16, 17-128) is covered.
"""

import json
import os
import platform
import random

import xxhash

ids = [b"", b"\x00", b"R-1", b"R-2", b"OV26-R00000001", "Zoë-7".encode()]
rng = random.Random(20261202)
ids += [bytes(rng.randrange(256) for _ in range(n)) for n in range(81)]

cases = [
    {"id_hex": i.hex(), "xxh3_128": format(xxhash.xxh3_128_intdigest(i), "032x")}
    for i in ids
]
out = {
    "made_by": "tests/reference/make_id_hashes.py",
    "library": f"xxhash {xxhash.VERSION} (xxHash C library {xxhash.XXHASH_VERSION})",
    "python": platform.python_version(),
    "note": "xxh3_128 is (high64 << 64) | low64 of XXH3_128bits(id), seed 0, as hex",
    "cases": cases,
}
path = os.path.join(os.path.dirname(__file__), "id_hashes.json")
with open(path, "w") as f:
    json.dump(out, f, indent=1)
    f.write("\n")
print(f"wrote {len(cases)} cases to {path}")
