"""Large tables: a fit whose junction log-likelihood would not fit in the memory budget keeps only the
posterior and a few predictive draws; LOO then recomputes the log-likelihood in blocks and agrees."""

from __future__ import annotations

import numpy as np

import allobranch as ab
import allobranch.inference.fit as fit_module
from allobranch.comparison.loo import elpd_loo


def test_log_likelihood_over_budget_is_recomputed_not_stored(monkeypatch) -> None:
    sim = ab.simulate_junctions(taxa=1, specimens_per_taxon=2, junctions_per_specimen=25, seed=3)
    table = ab.read_junctions(sim.frame, sim.mapping)
    kw = dict(draws=120, tune=120, chains=2, seed=5, progress=False)
    full = ab.fit(table, **kw)
    monkeypatch.setattr(fit_module, "CHUNK_BYTES", 1)  # every table is "large" now
    lean = ab.fit(table, **kw)
    assert "log_likelihood" in full.idata.groups()
    assert "log_likelihood" not in lean.idata.groups()
    assert any("not kept in memory" in n for n in lean.notes)
    # same seed, same posterior; ArviZ's PSIS-LOO on the stored values equals the blockwise recomputation
    np.testing.assert_array_equal(full.idata.posterior["mu"].values, lean.idata.posterior["mu"].values)
    assert abs(elpd_loo(full).elpd_loo - elpd_loo(lean).elpd_loo) < 1e-8
