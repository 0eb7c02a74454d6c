"""Write tests/data/assembly_mm.step: a tiny STEP assembly in millimetres (self-made).

Two bodies of an invented instrument (clearly not any real vehicle): a 100 x 200 x 10 mm
"panel" and a 50 x 50 x 50 mm "electronics" box standing 40 mm above it. Built with gmsh's
OpenCASCADE kernel (``pip install gmsh``, needed only to regenerate the file), then the
product names that the writer sets to its own banner are replaced by the bodies' names.

Run from the repository root:  python scripts/make_step_fixture.py
"""

from __future__ import annotations

import re
from pathlib import Path

OUT = Path(__file__).resolve().parent.parent / "tests" / "data" / "assembly_mm.step"
BODIES = (("panel", (0.0, 0.0, 0.0, 100.0, 200.0, 10.0)),
          ("electronics", (0.0, 0.0, 50.0, 50.0, 50.0, 50.0)))


def main() -> None:
    import gmsh

    gmsh.initialize()
    gmsh.option.setNumber("General.Terminal", 0)
    gmsh.model.add("assembly")
    for _, box in BODIES:
        gmsh.model.occ.addBox(*box)
    gmsh.model.occ.synchronize()
    gmsh.write(str(OUT))
    gmsh.finalize()
    text = OUT.read_text()
    # the writer names the root product '<banner> 1' and body k '<banner> 1.k'
    for k, (name, _) in enumerate(BODIES, start=1):
        text = re.sub(rf"'Open CASCADE STEP translator [0-9.]+ 1\.{k}'", f"'{name}'", text)
    text = re.sub(r"'Open CASCADE STEP translator [0-9.]+ 1'", "'instrument'", text)
    OUT.write_text(text)
    print(f"wrote {OUT} ({OUT.stat().st_size} bytes)")


if __name__ == "__main__":
    main()
