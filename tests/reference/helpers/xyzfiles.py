"""Multi-frame XYZ files for the reference checks: write (title, [(element,
xyz)]) molecules, read back (title, coordinates (n,3))."""
import numpy as np


def write_xyz(path, mols):
    with open(path, "w") as f:
        for title, atoms in mols:
            f.write("%d\n%s\n" % (len(atoms), title))
            for el, x in atoms:
                f.write("%s %.10f %.10f %.10f\n" % (el, x[0], x[1], x[2]))


def read_xyz(path):
    out, lines, i = [], open(path).read().split("\n"), 0
    while i < len(lines) and lines[i].strip():
        n = int(lines[i])
        x = np.array([[float(v) for v in ln.split()[1:4]] for ln in lines[i + 2:i + 2 + n]])
        out.append((lines[i + 1].strip(), x))
        i += 2 + n
    return out
