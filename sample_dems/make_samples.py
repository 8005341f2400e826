"""Regenerate the sample DEMs of the Kessel Plateau scenario (bit-for-bit; see README.md here).

Run from the repository root:  python sample_dems/make_samples.py
"""

from __future__ import annotations

from pathlib import Path

from morpho.synth import generate_surface, write_surface

HERE = Path(__file__).resolve().parent

#: Two neighbouring 1024 x 1024 survey blocks on the Moon, 20 m pixels (20.48 km square each).
#: 20.48 km is 0.690 deg of longitude at 12 deg N on the 1737.4 km sphere, so the blocks abut.
COMMON = dict(body="moon", shape=(1024, 1024), pixel_size_m=20.0, layout="hypothesis",
              diameter_range_px=(12.0, 150.0), center_lat_deg=12.0)
BLOCKS = {
    # mostly impact-like: impacts only, fresh to moderately degraded
    "kessel_halden_block": dict(seed=3101, n_craters=260, families={"impact": 1.0},
                                degradation=(0.0, 0.03), center_lon_deg=33.0),
    # a patch of cathode-spot-like craters (tracks, rim-on-rim clusters) in the north-east
    "kessel_marrow_block": dict(seed=3102, n_craters=300, families={"impact": 0.75, "cathode_spot": 0.25},
                                regions={"cathode_spot": (0.68, 0.35, 0.22)},
                                degradation=(0.0, 0.03), center_lon_deg=33.0 + 0.6905),
}


def main() -> None:
    for name, kw in BLOCKS.items():
        surface = generate_surface(**COMMON, **kw)
        paths = write_surface(surface, HERE, name, overwrite=True)
        print(f"{paths['dem'].name}: {len(surface.truth)} craters "
              f"({surface.truth['origin'].value_counts().to_dict()})")


if __name__ == "__main__":
    main()
