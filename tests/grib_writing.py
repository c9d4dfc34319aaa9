"""Writing small GRIB files with ecCodes for tests: invented values on a chosen grid, from
ecCodes' own sample messages (`codes_grib_new_from_samples`), one message per field, level
and time. The values are ours; the encoding (GRIB1 or GRIB2, grid keys, pv array) is ecCodes'.
"""

from __future__ import annotations

import numpy as np

#: ECMWF parameter ids (GRIB1 table 128, also valid in GRIB2 through ecCodes' paramId).
PARAM = {"u": 131, "v": 132, "q": 133, "sp": 134, "lnsp": 152, "t": 130, "r": 157}


def lonlat_keys(lon, lat) -> dict:
    """Grid keys of a regular longitude-latitude grid, rows stored north to south."""
    lon, lat = np.asarray(lon, float), np.asarray(lat, float)
    return {
        "Ni": lon.size, "Nj": lat.size,
        "latitudeOfFirstGridPointInDegrees": float(lat.max()), "latitudeOfLastGridPointInDegrees": float(lat.min()),
        "longitudeOfFirstGridPointInDegrees": float(lon[0]), "longitudeOfLastGridPointInDegrees": float(lon[-1]),
        "iDirectionIncrementInDegrees": float(lon[1] - lon[0]), "jDirectionIncrementInDegrees": float(abs(lat[1] - lat[0])),
        "jScansPositively": 0,
    }


def message(name: str, level_type: str, level: int, values, hour: int = 0) -> dict:
    """One field: short name (a key of PARAM), level type and value, 2-D values as stored."""
    return {"paramId": PARAM[name], "typeOfLevel": level_type, "level": int(level),
            "values": np.asarray(values, float), "hour": int(hour)}


def write_grib(path, sample: str, grid: dict, messages: list, pv=None, bits: int = 24,
               extra: dict | None = None) -> None:
    """Write ``messages`` to ``path`` from the ecCodes sample ``sample`` with the grid keys
    ``grid`` (set in order), the pv array on hybrid levels, and ``bits`` per packed value."""
    import eccodes as ec

    with open(path, "wb") as f:
        for m in messages:
            h = ec.codes_grib_new_from_samples(sample)
            try:
                for k, v in {**grid, **(extra or {})}.items():
                    ec.codes_set(h, k, v)
                ec.codes_set(h, "paramId", m["paramId"])
                ec.codes_set(h, "typeOfLevel", m["typeOfLevel"])
                ec.codes_set(h, "level", m["level"])
                if pv is not None and m["typeOfLevel"] == "hybrid":
                    ec.codes_set(h, "PVPresent", 1)
                    ec.codes_set_array(h, "pv", np.asarray(pv, float))
                ec.codes_set(h, "dataDate", 20310301)
                ec.codes_set(h, "dataTime", 100 * m["hour"])
                ec.codes_set(h, "bitsPerValue", bits)
                ec.codes_set_values(h, np.ascontiguousarray(m["values"], float).ravel())
                f.write(ec.codes_get_message(h))
            finally:
                ec.codes_release(h)


def grid_lonlat(path) -> tuple[np.ndarray, np.ndarray]:
    """ecCodes' own longitudes and latitudes of the first message's points, (Nj, Ni)."""
    import eccodes as ec

    with open(path, "rb") as f:
        h = ec.codes_grib_new_from_file(f)
        try:
            shape = (ec.codes_get(h, "Nj") if ec.codes_is_defined(h, "Nj") else ec.codes_get(h, "Ny"),
                     ec.codes_get(h, "Ni") if ec.codes_is_defined(h, "Ni") else ec.codes_get(h, "Nx"))
            lat = np.asarray(ec.codes_get_array(h, "latitudes"), float).reshape(shape)
            lon = np.asarray(ec.codes_get_array(h, "longitudes"), float).reshape(shape)
        finally:
            ec.codes_release(h)
    return lon, lat
