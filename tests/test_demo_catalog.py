"""The bundled demo catalogue reads as its README says (invented data, so only self-consistency)."""

import numpy as np
import pytest

from tumble.exceptions import PhotometryError
from tumble.photometry import iter_survey, read_lightcurve

from conftest import DEMO_DIR


def groups():
    out = {}
    for p in sorted((DEMO_DIR / "campaign").iterdir()):
        out.setdefault(p.name.split("__")[0], []).append(p)
    return out


def test_campaign_objects_read_except_the_two_broken_files():
    g = groups()
    assert len(g) == 12
    for name, files in g.items():
        if name == "KRN-011":
            with pytest.raises(PhotometryError, match=r"line \d+, column 'mag': 'n/a\?' is not a number"):
                read_lightcurve(files)
        elif name == "KRN-012":
            with pytest.raises(PhotometryError, match="truncated or corrupt gzip"):
                read_lightcurve(files)
        else:
            lc = read_lightcurve(files)
            assert lc.object_id == name
            assert lc.n_sessions >= 4 and lc.n_points > 200
            assert lc.sun_dir is not None and lc.meta["light_time"].startswith("corrected")


def test_sparse_sample_and_truth():
    from astropy.table import Table

    items = dict(iter_survey(DEMO_DIR / "sparse" / "svs_sample.csv.gz"))
    assert len(items) == 240
    assert not any(isinstance(v, PhotometryError) for v in items.values())
    assert all(np.all(v.session == -1) for v in items.values())
    truth = Table.read(DEMO_DIR / "truth.ecsv")
    assert set(truth["object"]) == set(items) | set(groups())
    assert set(truth["rotation"]) == {"PA", "NPA"}


def test_sparse_orbits_give_every_object_the_geometry_of_its_table():
    # the survey's orbital elements (sparse/svs_orbits.csv, for --orbits) reproduce the table's own
    # phase angles: the Sun and observer directions the sparse route gets are those of the simulation
    from tumble.geometry import phase_angle_deg
    from tumble.orbits import read_orbits
    from tumble.photometry import ReadOptions

    orbits = read_orbits(DEMO_DIR / "sparse" / "svs_orbits.csv")
    items = dict(iter_survey(DEMO_DIR / "sparse" / "svs_sample.csv.gz", options=ReadOptions(orbits=orbits)))
    assert len(items) == 240 and all(orbits.lookup(name) is not None for name in items)
    for lc in list(items.values())[::40]:
        assert lc.sun_dir is not None and lc.obs_dir is not None
        np.testing.assert_allclose(phase_angle_deg(lc.sun_dir, lc.obs_dir), lc.phase_deg, atol=0.01)
