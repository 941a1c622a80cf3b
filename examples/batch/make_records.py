"""Simulate the records of the batch example (an invented scenario, see README.md here).

    python examples/batch/make_records.py            # writes examples/batch/records/
    python examples/batch/make_records.py DIR        # writes DIR/records/ instead
    python examples/batch/make_records.py --force    # replace records written before

Every record comes from ``cavchar simulate`` at a fixed seed, so the files are the
same byte for byte on every machine; the commands below are the whole recipe.
"""

from __future__ import annotations

import sys
from pathlib import Path

#: (file name, arguments of ``cavchar simulate``); true values of the invented scenario
RECORDS = [
    # Kestrel, 9.264 GHz: T_c = 46 ms, n_th = 0.040; two exact jump records of 30 s
    ("kestrel-jumps-1.csv", ["jumps", "--lifetime", "46ms", "--n-thermal", "0.040",
                             "--duration", "30s", "--freq", "9.264GHz", "--seed", "401"]),
    ("kestrel-jumps-2.csv", ["jumps", "--lifetime", "46ms", "--n-thermal", "0.040",
                             "--duration", "30s", "--freq", "9.264GHz", "--seed", "402"]),
    # Kestrel: two power ring-downs of the classical field (one fit sharing T_c)
    ("kestrel-ringdown-1.csv", ["ringdown", "--signal", "power", "--lifetime", "46ms",
                                "--duration", "250ms", "--points", "400", "--floor", "0.004",
                                "--noise", "0.006", "--freq", "9.264GHz", "--seed", "403"]),
    ("kestrel-ringdown-2.csv", ["ringdown", "--signal", "power", "--lifetime", "46ms",
                                "--duration", "250ms", "--points", "400", "--floor", "0.004",
                                "--noise", "0.006", "--freq", "9.264GHz", "--seed", "404"]),
    # Harrier, 7.412 GHz: T_c = 12 ms, n_th = 0.075; photon number read every 1 ms
    ("harrier-sampled.csv.gz", ["sampled", "--lifetime", "12ms", "--n-thermal", "0.075",
                                "--duration", "15s", "--interval", "1ms", "--freq", "7.412GHz",
                                "--seed", "405"]),
    # Harrier: raw parity probes (fringe visibility 0.9, readout errors 0.03 / 0.05)
    ("harrier-probes.csv.gz", ["probes", "--lifetime", "12ms", "--n-thermal", "0.075",
                               "--duration", "6s", "--interval", "1ms", "--visibility", "0.9",
                               "--phase-per-photon", "180deg", "--readout-error-0", "0.03",
                               "--readout-error-1", "0.05", "--freq", "7.412GHz", "--seed", "406"]),
    # Harrier: a ring-down in dB
    ("harrier-ringdown-db.csv", ["ringdown", "--signal", "db", "--lifetime", "12ms",
                                 "--duration", "150ms", "--points", "300", "--floor", "1e-4",
                                 "--noise", "0.3", "--freq", "7.412GHz", "--seed", "407"]),
]


def main(argv: list[str]) -> int:
    from cavchar.cli.main import main as cavchar

    force = "--force" in argv
    rest = [a for a in argv if a != "--force"]
    base = Path(rest[0]) if rest else Path(__file__).resolve().parent
    out = base / "records"
    for name, args in RECORDS:
        code = cavchar(["simulate", *args, "-o", str(out), "--file", name,
                        *(["--force"] if force else [])])
        if code != 0:
            return code
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
