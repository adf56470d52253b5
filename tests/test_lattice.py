"""Diamond-lattice clusters."""

import math

import numpy as np
import pytest

from dnpqc.errors import ScenarioError
from dnpqc.physics.constants import DIAMOND_LATTICE_NM
from dnpqc.physics.lattice import diamond_sites_nm, random_cluster_nm


def test_nearest_neighbour_shell():
    # Diamond: 4 nearest neighbours at √3/4·a = 1.5445 Å (handbook); one of them is the N,
    # so the vacancy has 3 carbon neighbours; next shell: 12 at a/√2 = 2.522 Å.
    sites = diamond_sites_nm(0.26)
    r = np.linalg.norm(sites, axis=1)
    nn = math.sqrt(3) / 4 * DIAMOND_LATTICE_NM
    assert np.sum(np.isclose(r, nn)) == 3
    assert np.sum(np.isclose(r, DIAMOND_LATTICE_NM / math.sqrt(2))) == 12
    # the three carbon neighbours lie below the vacancy (the N is along +z): cosθ = -1/3
    neighbours = sites[np.isclose(r, nn)]
    assert np.allclose(neighbours[:, 2] / nn, -1 / 3)


def test_site_density():
    # diamond holds 8 atoms per cubic cell (handbook): a ball of radius R holds ≈ 8·(4/3)πR³/a³
    radius = 2.0
    expected = 8 * 4 / 3 * math.pi * radius**3 / DIAMOND_LATTICE_NM**3
    assert len(diamond_sites_nm(radius)) == pytest.approx(expected, rel=0.03)


def test_random_cluster_is_seeded_and_abundance_is_binomial():
    a = random_cluster_nm(radius_nm=2.0, seed=7)
    assert a == random_cluster_nm(radius_nm=2.0, seed=7)
    assert a != random_cluster_nm(radius_nm=2.0, seed=8)
    sites = len(diamond_sites_nm(2.0))
    counts = [len(random_cluster_nm(radius_nm=2.0, seed=s)) for s in range(40)]
    mean, sd = sites * 0.0107, math.sqrt(sites * 0.0107 * (1 - 0.0107))
    # binomial occupation at 1.07 % natural abundance (IUPAC): mean of 40 draws within 5σ/√40
    assert abs(np.mean(counts) - mean) < 5 * sd / math.sqrt(40)


def test_min_distance_and_cap():
    cluster = random_cluster_nm(
        radius_nm=2.0, seed=1, abundance=0.05, min_distance_nm=0.5, max_nuclei=5
    )
    assert len(cluster) == 5
    assert all(np.linalg.norm(p) >= 0.5 for p in cluster)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"radius_nm": -1.0, "seed": 1}, "radius_nm"),
        ({"radius_nm": 1.0, "seed": 1, "abundance": 1.5}, "abundance"),
        ({"radius_nm": 1.0, "seed": 1, "min_distance_nm": -0.1}, "min_distance_nm"),
    ],
)
def test_bad_lattice_input(kwargs, match):
    with pytest.raises(ScenarioError, match=match):
        random_cluster_nm(**kwargs)
