"""Malformed-configuration sweep of ``heliaudit ingest`` (issue #12), run by hand.

Takes tests/data/site_basic.toml, replaces the value of one to three ``key = value`` lines
(or misspells a key) with a value of the wrong kind or range (nan, inf, "", NUL, ids over 64
characters, tables where values belong and values where tables belong, offset-aware times, bad
strftime directives, bad patterns, "+25:99", ...), runs ``heliaudit ingest`` on the result in
process and counts tracebacks (an exception escaping the command), accepted configurations
and configuration errors.

    python tests/fuzz/sweep_config.py --configs 300 --seed 1
"""

from __future__ import annotations

import argparse
import random
import re
import shutil
import sys
import tempfile
from collections import Counter
from pathlib import Path

DATA = Path(__file__).resolve().parents[1] / "data"
VALUES = ["nan", "inf", "-inf", '""', "5", "[1, 2]", "{ a = 1 }", '"a\\u0000b"', '"' + "x" * 70 + '"',
          "2023-01-01T00:00:00+02:00", "-1e9", "true", '"+25:99"', '"%Y-%m-%d %Q"', '"a**b.csv"',
          '"../*.csv"', '"   "', "1e400", "[]", "{}", '"%"', '"(site)"', "0", '"utc"',
          "2023-13-01", '"\\t"', "[[1]]", '"Europe/Nowhere"']


def mutate(text: str, rng: random.Random) -> tuple[str, list[str]]:
    lines = text.split("\n")
    cand = [i for i, x in enumerate(lines) if re.match(r"^\s*[A-Za-z_]+\s*=", x)]
    done = []
    for _ in range(rng.choice([1, 1, 2, 3])):
        i = rng.choice(cand)
        key, _val = lines[i].split("=", 1)
        if rng.random() < 0.15:
            k = key.strip()
            lines[i] = k[:-1] + k[-1] * 2 + " =" + _val  # a misspelt key
            done.append(f"typo:{k}")
        else:
            v = rng.choice(VALUES)
            lines[i] = f"{key}= {v}"
            done.append(f"{key.strip()}={v[:20]}")
    return "\n".join(lines), done


def main(argv=None) -> int:
    from click.testing import CliRunner

    from heliaudit.cli import main as cli

    ap = argparse.ArgumentParser()
    ap.add_argument("--configs", type=int, default=300)
    ap.add_argument("--seed", type=int, default=1)
    a = ap.parse_args(argv)
    rng = random.Random(a.seed)
    base = (DATA / "site_basic.toml").read_text()
    out = Counter()
    examples = []
    accepted = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        shutil.copy(DATA / "basic_2023-06-01.csv", tmp / "basic_2023-06-01.csv")
        for n in range(a.configs):
            text, what = mutate(base, rng)
            cfg = tmp / f"c{n}.toml"
            cfg.write_text(text)
            r = CliRunner().invoke(cli, ["--db", str(tmp / f"s{n}.sqlite"), "ingest",
                                         "--no-compute", "--silent", str(cfg),
                                         str(tmp / "basic_2023-06-01.csv")])
            if r.exception is not None and not isinstance(r.exception, SystemExit):
                out["traceback"] += 1
                out["tb:" + type(r.exception).__name__] += 1
                examples.append((what, repr(r.exception)[:150]))
            elif r.exit_code == 0:
                out["accepted"] += 1
                accepted.append(what)
            else:
                out["error_line"] += 1
    import heliaudit

    print(f"code: {Path(heliaudit.__file__).parent.parent}")
    print(f"configs: {a.configs} (seed {a.seed})")
    for k, v in sorted(out.items()):
        print(f"  {k}: {v}")
    for what, exc in examples[:15]:
        print(f"  example: {what} -> {exc}")
    for what in accepted[:20]:
        print(f"  accepted: {what}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
