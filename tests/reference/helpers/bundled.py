"""Shared by the checks of the bundled model (tests/reference/model_*.py):
TAP lines with known shortfalls, and whether the bundled model is a pilot."""
import json
import os

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__)))))
NADIR = os.environ.get("ND_NADIR", os.path.join(ROOT, "build", "nadir"))
# ND_MODEL: a candidate model instead of the bundled one (to try it with
# these checks before shipping it)
MODEL = os.environ.get("ND_MODEL", os.path.join(ROOT, "potential", "models", "default.model"))
SHORTFALL = "the bundled model is a pilot (issue 10)"


class Tap:
    """TAP results; a failed check given a todo reason is a known shortfall
    (reported as TODO, not counted as a failure)."""

    def __init__(self):
        self.count = 0
        self.failed = 0

    def __call__(self, passed, name, detail="", todo=None):
        self.count += 1
        mark = "" if passed or todo is None else " # TODO " + todo
        print("%s %d - %s%s" % ("ok" if passed else "not ok", self.count, name, mark))
        if detail:
            print("# " + detail.replace("\n", "\n# "))
        if not passed and todo is None:
            self.failed += 1

    def finish(self):
        print("1..%d" % self.count)
        return 1 if self.failed else 0


def model_is_pilot(path=MODEL):
    """True when the model's provenance "status" calls it a pilot."""
    with open(path, "rb") as f:
        text = f.read(1 << 20).decode("utf-8", "replace")
    header, _ = json.JSONDecoder().raw_decode(text[text.index("\n") + 1:])
    return "pilot" in str(header.get("provenance", {}).get("status", "")).lower()
