#!/usr/bin/env python3
"""Extract tests/data/airports-us-utm16n.csv from the airportsdata wheel.

Usage: python3 extract_airports.py /path/to/airportsdata-20260905-py3-none-any.whl [out.csv]

Stdlib only. Reads airportsdata/airports.csv straight out of the wheel (a zip)
and keeps the airports that fall in one UTM zone (zone 16N, EPSG:32616):

  * country == "US"
  * -90 <= lon < -84   (UTM zone 16 is 90W..84W; half-open so the edge is unambiguous)
  * lat and lon finite
  * exact duplicate positions dropped: the first row (package order, i.e. sorted
    by ICAO key) with a given (lon, lat) float pair is kept, later ones dropped

Output columns: id,lon,lat where id is the package's "icao" key and lon/lat are
the package's own text (decimal degrees, WGS 84), not re-rounded.
"""
import csv
import hashlib
import io
import math
import sys
import zipfile

MEMBER = "airportsdata/airports.csv"
LON_MIN, LON_MAX = -90.0, -84.0  # UTM zone 16


def main():
    wheel = sys.argv[1]
    out = sys.argv[2] if len(sys.argv) > 2 else "airports-us-utm16n.csv"
    with zipfile.ZipFile(wheel) as z:
        text = z.read(MEMBER).decode("utf-8")

    seen = set()
    rows = []
    for rec in csv.DictReader(io.StringIO(text)):
        if rec["country"] != "US":
            continue
        lon, lat = float(rec["lon"]), float(rec["lat"])
        if not (math.isfinite(lon) and math.isfinite(lat)):
            continue
        if not (LON_MIN <= lon < LON_MAX):
            continue
        if (lon, lat) in seen:  # exact duplicate position: keep the first
            continue
        seen.add((lon, lat))
        rows.append((rec["icao"], rec["lon"], rec["lat"]))

    with open(out, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["id", "lon", "lat"])
        w.writerows(rows)

    lons = [float(r[1]) for r in rows]
    lats = [float(r[2]) for r in rows]
    print("rows", len(rows))
    print("bbox lon", min(lons), max(lons), "lat", min(lats), max(lats))
    with open(out, "rb") as f:
        print("sha256", hashlib.sha256(f.read()).hexdigest())


if __name__ == "__main__":
    main()
