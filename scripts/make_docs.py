"""Regenerate docs/config.md from the config schema (nrgsolve.config.SCHEMA) and the model registry, and the
quantity table of docs/results.md from nrgsolve.result.QUANTITIES.

    python scripts/make_docs.py

The table part is exactly config.config_reference_markdown(); a test checks
that docs/config.md contains it, so edit the schema, not the table.
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from nrgsolve.config import config_reference_markdown, models_markdown  # noqa: E402
from nrgsolve.result import quantities_markdown  # noqa: E402

INTRO = """# Config reference

A run is described by one TOML file with the tables `[impurity]`, `[bath]`
(physics), `[discretization]`, `[run]` (numerical approximation) and
`[output]`; a sweep adds a `[sweep]` table.  Every key is optional and has
the default below.  Unknown tables or keys, wrong types and out-of-range
values stop the program before any numerics, with a one-line message naming
the key and the allowed range (and a "did you mean" suggestion for typos).
A key of `[impurity]` that the chosen model does not use (for example
`spin` with `model = "kondo"`), or of `[bath]` that the shape does not use,
is an error naming the model and the keys it uses.  The ranges keep the
numerics meaningful relative to the bandwidth; their reasons are given
beside the constants in `nrgsolve/config.py`.  Before a run starts, its
memory and time are estimated from the kept states (or the energy cutoff),
the chain length and the twists (`nrgsolve/resources.py`); a run that
cannot fit into the machine's memory is refused.

Units: energies and temperatures in units of the conduction half-bandwidth
D (k_B = 1); `exchange` is the dimensionless ρJ with ρ = 1/(2D), positive
for antiferromagnetic coupling; `hybridization` is Γ = πρV² at the Fermi
level; `field` is the Zeeman energy h in H = −h S_z.

Ready-made examples are in `configs/`.

"""

SWEEP = """

## Sweeps

`[sweep]` maps a parameter name written `"table.key"` to a list of values
or to a range, and may name the output folder:

```toml
[sweep]
"impurity.exchange" = [0.15, 0.2, 0.25]
"impurity.interaction" = { start = 0.05, stop = 0.4, points = 4, spacing = "log" }
folder = "my_sweep"      # default: <config name>_sweep, relative to the current folder
```

The points are the outer product of all lists (the last parameter varies
fastest), at most 10000.  Every value is checked like the key itself.
Integer keys (e.g. `"run.kept_states" = { start = 100, stop = 200, points
= 3 }`) take integer `start` and `stop` and give integers; `points` must
be an integer.  A swept `[impurity]` key must be used by the model.  `nrgsolve sweep`
writes `point_0000.h5`, `point_0001.h5`, ... and `index.csv` (see
[results.md](results.md)); each point file stores the resolved config of
that point alone.
"""


def render() -> str:
    """The full text of docs/config.md."""
    return (INTRO + "## Models\n\nDeclared in `nrgsolve/models/` (one file per model); a key of `[impurity]` "
            "that the model does not list is refused.\n\n" + models_markdown() + "\n\n## Keys\n\n"
            + config_reference_markdown() + "\n" + SWEEP)


START, END = "<!-- config-reference-start -->", "<!-- config-reference-end -->"


def render_readme(text: str) -> str:
    """README text with the config table between the reference markers replaced."""
    return replace_between(text, START, END, config_reference_markdown())


Q_START, Q_END = "<!-- quantities-start -->", "<!-- quantities-end -->"


def replace_between(text: str, start: str, end: str, body: str) -> str:
    a, b = text.index(start) + len(start), text.index(end)
    return text[:a] + "\n" + body + "\n" + text[b:]


def main() -> int:
    out = ROOT / "docs" / "config.md"
    out.write_text(render(), encoding="utf-8")
    print(f"wrote {out}")
    readme = ROOT / "README.md"
    readme.write_text(render_readme(readme.read_text(encoding="utf-8")), encoding="utf-8")
    print(f"updated the config table in {readme}")
    results = ROOT / "docs" / "results.md"
    results.write_text(replace_between(results.read_text(encoding="utf-8"), Q_START, Q_END, quantities_markdown()),
                       encoding="utf-8")
    print(f"updated the quantity table in {results}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
