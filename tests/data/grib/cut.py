"""Rebuild the cut GRIB samples in this folder from the original files (see README.md).

    python tests/data/grib/cut.py ORIGINAL.grib2 OUT.grib2

Keeps, byte for byte, the messages a budget needs: wind (u with v in the same message),
temperature and relative humidity on isobaric levels, surface pressure and the file's own
precipitable water. Everything else is dropped to keep the repository small.
"""

import sys

import eccodes

KEEP = {
    ("u", "isobaricInhPa"),
    ("t", "isobaricInhPa"),
    ("r", "isobaricInhPa"),
    ("sp", "surface"),
    ("pwat", "atmosphereSingleLayer"),
}


def cut(src: str, dst: str) -> int:
    kept = 0
    with open(src, "rb") as f, open(dst, "xb") as out:
        while (h := eccodes.codes_grib_new_from_file(f)) is not None:
            try:
                if (eccodes.codes_get(h, "shortName"), eccodes.codes_get(h, "typeOfLevel")) in KEEP:
                    out.write(eccodes.codes_get_message(h))
                    kept += 1
            finally:
                eccodes.codes_release(h)
    return kept


if __name__ == "__main__":
    print(cut(sys.argv[1], sys.argv[2]), "messages kept")
