"""Write the invented demo galaxy Velmora as an HDF5 snapshot.

Usage: ``python demo/make_disc_galaxy.py OUT.h5 [--n-particles N] [--seed S] [--overwrite]``.
The model and its parameters are described in ``demo/README.md`` and in
:mod:`pipeline.scenario`.
"""

import argparse
import sys

from pipeline.errors import CubewrightError
from pipeline.scenario import DISC_GALAXY_PARAMETERS, make_disc_galaxy


def main(argv=None):
    """Parse the arguments, write the snapshot and print what was made; return the exit code."""
    parser = argparse.ArgumentParser(
        description=f"Write the invented disc galaxy {DISC_GALAXY_PARAMETERS.galaxy} "
                    "as an HDF5 snapshot in cubewright's own layout.")
    parser.add_argument("output", help="snapshot file to write (its folder must exist)")
    parser.add_argument("--n-particles", type=int, default=300_000, metavar="N",
                        help="number of gas particles, at least 1000 (default: 300000)")
    parser.add_argument("--seed", type=int, default=2026, metavar="S",
                        help="seed of the random generator (default: 2026)")
    parser.add_argument("--overwrite", action="store_true", help="replace an existing file")
    arguments = parser.parse_args(argv)
    try:
        path = make_disc_galaxy(arguments.output, n_particles=arguments.n_particles,
                                seed=arguments.seed, overwrite=arguments.overwrite)
    except (CubewrightError, ValueError) as err:
        parser.error(str(err))
    print(f"wrote {path}: {arguments.n_particles} particles, seed {arguments.seed}")
    print(DISC_GALAXY_PARAMETERS.summary())
    return 0


if __name__ == "__main__":
    sys.exit(main())
