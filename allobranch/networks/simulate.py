"""Simulated (invented) branching networks with a known exponent, and their tracing into SWC sample points.

Used by the tests and benchmarks; every random step takes a ``seed``. Nothing here is real data: tables and
files carry the word "simulated".
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from allobranch.networks.swc import SOMA, SWC_FIELDS

#: Note attached to simulated tables (``attrs["note"]``) and written into simulated SWC headers.
SIMULATED_NOTE = "simulated network (invented data with a known exponent), not a measurement"


def simulate_segments(
    n_junctions: int,
    *,
    exponent: float,
    seed: int,
    root_radius: float = 10.0,
    split: tuple[float, float] = (0.25, 0.75),
    scatter: float = 0.0,
    length_radii: tuple[float, float] = (8.0, 16.0),
) -> pd.DataFrame:
    """A random binary tree whose junctions obey ``r0^a = r1^a + r2^a``.

    Starting from one root segment, a tip chosen at random splits ``n_junctions`` times into two daughters
    with radii ``r0 f^(1/a)`` and ``r0 (1 - f)^(1/a)``, ``f`` uniform on ``split``; ``scatter`` multiplies
    each daughter by ``exp(N(0, scatter))`` (biological deviation from the law).

    Parameters
    ----------
    n_junctions : int
        Number of branch points (the tree has ``2 n_junctions + 1`` segments).
    exponent : float
        The exponent ``a``.
    seed : int
        Seed of the random generator.
    root_radius : float
        Radius of the root segment.
    split : (float, float)
        Range of the flow share ``f``.
    scatter : float
        Log-scale standard deviation of the daughters' deviation from the law.
    length_radii : (float, float)
        Segment length as a multiple of its radius, uniform on this range.

    Returns
    -------
    pandas.DataFrame
        Columns ``segment`` (1, 2, ...), ``parent`` (``None`` for the root), ``radius`` and ``length``, parents
        before children; ``attrs["note"]`` says it is simulated.
    """
    rng = np.random.default_rng(seed)
    n = 2 * n_junctions + 1
    radius = np.empty(n)
    parent = np.full(n, -1, dtype=np.int64)
    radius[0] = root_radius
    tips = [0]
    shares = rng.uniform(*split, size=n_junctions)
    picks = rng.random(n_junctions)
    devs = (
        np.exp(rng.normal(0.0, scatter, size=(n_junctions, 2))) if scatter > 0 else np.ones((n_junctions, 2))
    )
    for k in range(n_junctions):
        slot = int(picks[k] * len(tips))
        node = tips[slot]
        tips[slot] = tips[-1]
        tips.pop()
        a, b = 2 * k + 1, 2 * k + 2
        radius[a] = radius[node] * shares[k] ** (1 / exponent) * devs[k, 0]
        radius[b] = radius[node] * (1 - shares[k]) ** (1 / exponent) * devs[k, 1]
        parent[a] = parent[b] = node
        tips += [a, b]
    length = radius * rng.uniform(*length_radii, size=n)
    frame = pd.DataFrame(
        {
            "segment": np.arange(1, n + 1),
            "parent": pd.array(np.where(parent >= 0, parent + 1, 0), dtype="Int64"),
            "radius": radius,
            "length": length,
        }
    )
    frame.loc[parent < 0, "parent"] = pd.NA
    frame.attrs["note"] = SIMULATED_NOTE
    return frame


def trace_swc(
    segments: pd.DataFrame,
    *,
    seed: int,
    spacing: float = 1.0,
    noise: float = 0.05,
    swelling: float = 0.3,
    decay_radii: float = 1.0,
    soma_radius: float | None = None,
    neurite_type: int = 3,
) -> pd.DataFrame:
    """Trace a simulated segment table into SWC sample points with noisy radii.

    Each segment is a straight line in a random direction from the end of its parent, sampled every
    ``spacing`` (its last sample is the branch point or tip). A sample's radius is the segment's radius,
    flaring from the parent's radius at the start and swelling by ``swelling`` towards a branch point at the
    end (both decaying over ``decay_radii`` radii), times ``exp(N(0, noise))``. A soma sample (type 1) is the
    root; the root segment leaves it.

    Parameters
    ----------
    segments : pandas.DataFrame
        From :func:`simulate_segments` (parents before children).
    seed : int
        Seed of the random generator.
    spacing : float
        Distance between samples.
    noise : float
        Log-scale standard deviation of each sample's radius.
    swelling : float
        Relative swelling at a branch point.
    decay_radii : float
        Length of the flare and swelling, in the segment's radii.
    soma_radius : float, optional
        Radius of the soma sample (default twice the root segment's).
    neurite_type : int
        SWC type of the samples (3, basal dendrite, by default).

    Returns
    -------
    pandas.DataFrame
        Columns :data:`allobranch.networks.swc.SWC_FIELDS`; ``attrs["note"]`` says it is simulated.
    """
    rng = np.random.default_rng(seed)
    n = len(segments)
    radius = segments["radius"].to_numpy(dtype=float)
    length = segments["length"].to_numpy(dtype=float)
    ids = segments["segment"].to_numpy()
    pos = {int(s): i for i, s in enumerate(ids)}
    parent = np.array([-1 if pd.isna(p) else pos[int(p)] for p in segments["parent"]], dtype=np.int64)
    has_children = np.zeros(n, dtype=bool)
    has_children[parent[parent >= 0]] = True
    direction = rng.normal(size=(n, 3))
    direction /= np.linalg.norm(direction, axis=1, keepdims=True)
    count = np.maximum(1, np.ceil(length / spacing).astype(np.int64))
    start = np.zeros((n, 3))
    for i in range(n):  # parents come first
        if parent[i] >= 0:
            start[i] = start[parent[i]] + direction[parent[i]] * length[parent[i]]
    seg = np.repeat(np.arange(n), count)
    k = np.concatenate([np.arange(1, c + 1) for c in count]) if n else np.zeros(0)
    s = length[seg] * k / count[seg]
    xyz = start[seg] + direction[seg] * s[:, None]
    r_parent = np.where(parent >= 0, radius[np.maximum(parent, 0)], radius)
    lam = decay_radii * radius[seg]
    true = radius[seg] + (r_parent[seg] - radius[seg]) * np.exp(-s / lam)
    true *= 1 + swelling * has_children[seg] * np.exp(-(length[seg] - s) / lam)
    sample_r = true * np.exp(rng.normal(0.0, noise, size=len(seg)))
    sample_id = np.arange(2, len(seg) + 2)
    last = np.cumsum(count) - 1  # position of each segment's last sample
    first = last - count + 1
    prev = np.arange(len(seg)) - 1 + 2  # id of the previous sample
    parent_id = prev.copy()
    starts_parent = np.where(parent >= 0, sample_id[last[np.maximum(parent, 0)]], 1)
    parent_id[first] = starts_parent
    soma = pd.DataFrame(
        {
            "id": [1],
            "type": [SOMA],
            "x": [0.0],
            "y": [0.0],
            "z": [0.0],
            "radius": [soma_radius if soma_radius is not None else 2 * radius[parent < 0].max()],
            "parent": [-1],
        }
    )
    body = pd.DataFrame(
        {
            "id": sample_id,
            "type": neurite_type,
            "x": xyz[:, 0],
            "y": xyz[:, 1],
            "z": xyz[:, 2],
            "radius": sample_r,
            "parent": parent_id,
        }
    )
    out = pd.concat([soma, body], ignore_index=True)[list(SWC_FIELDS)]
    out.attrs["note"] = SIMULATED_NOTE
    return out
