#!/usr/bin/python3
"""Adds fields to the provenance object of a nadir model file.

    tools/annotate-model.py MODEL FIELDS.json [-o OUT]

FIELDS.json holds a JSON object whose keys are merged into the header's
"provenance" object (existing keys are replaced). The weights are copied
byte for byte and the checksum line is recomputed, following the file
format described in potential/model.h. Used to record what `nadir train`
cannot know: the reference method, the date, held-out accuracy and status.
"""
import json
import os
import sys
import tempfile


def fnv1a64(data):
    h = 0xcbf29ce484222325
    for b in data:
        h ^= b
        h = (h * 0x100000001b3) & 0xFFFFFFFFFFFFFFFF
    return h


def main(argv):
    if len(argv) not in (3, 5) or (len(argv) == 5 and argv[3] != "-o"):
        sys.stderr.write(__doc__)
        return 2
    path, fields_path = argv[1], argv[2]
    out = argv[4] if len(argv) == 5 else path
    data = open(path, "rb").read()
    magic = b"nadir-model 1\n"
    if not data.startswith(magic):
        sys.stderr.write("%s: not a nadir model file of format version 1\n" % path)
        return 3
    tail = data.rfind(b"\nchecksum fnv1a64 ")
    if tail < 0 or int(data[tail + 18:tail + 34], 16) != fnv1a64(data[:tail]):
        sys.stderr.write("%s: checksum missing or wrong; refusing to touch it\n" % path)
        return 3
    text = data[len(magic):].decode("latin-1")
    header, end = json.JSONDecoder().raw_decode(text)
    if text[end] != "\n":
        sys.stderr.write("%s: header not followed by a newline\n" % path)
        return 3
    weights = data[len(magic) + end + 1:tail]
    header.setdefault("provenance", {}).update(json.load(open(fields_path)))
    # allow_nan=False: NaN is not JSON, and the program would refuse the file
    try:
        text = json.dumps(header, indent=1, allow_nan=False)
    except ValueError:
        sys.stderr.write("%s: a field is NaN or infinite; use null for an unknown value\n" % fields_path)
        return 2
    body = magic + text.encode("utf-8") + b"\n" + weights
    body += b"\nchecksum fnv1a64 %016x\n" % fnv1a64(body)
    fd, tmp = tempfile.mkstemp(dir=os.path.dirname(os.path.abspath(out)) or ".")
    with os.fdopen(fd, "wb") as f:
        f.write(body)
    os.chmod(tmp, 0o644)
    os.replace(tmp, out)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
