"""Generate data.csv for the catalyst-rate-centred scenario (run: python generate.py).

The data are those of ``catalyst-rate-raw`` (same reactor, same seed): this runs that folder's
generator and writes its output here, so the two forms of the model are fitted to the same file.
"""
import runpy
from pathlib import Path

here = Path(__file__).resolve().parent
generator = runpy.run_path(str(here.parent / "catalyst-rate-raw" / "generate.py"))
generator["write"](here / "data.csv")
