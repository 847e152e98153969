"""The stored dynamic fit says how its transition prior ran (issue 11: the stored fit records what ran)."""

from __future__ import annotations

import json

from tests.helpers.planted_study import planted_study
from tracker.execution import configured
from tracker.models.dynamic import TRANSITION_PRIOR


def test_stored_dynamic_fit_records_the_transition_prior(tmp_path):
    # source: definition: the default prior is off (strength 0), so there is no centre to record
    study, _ = planted_study(tmp_path, n_actors=50, n_positions=3, n_periods=3, density_in=0.25,
                             density_out=0.04, movers=4, seed=7)
    with study, configured(workers=1):
        study.fit(positions=3, draws=0)
        fit_id = int(study.store.fits()["fit"].iloc[-1])
        diag = study.store.fit_periods(fit_id)["diagnostics"].iloc[0]
    values = diag if isinstance(diag, dict) else json.loads(diag)
    assert values["transition_prior"] == TRANSITION_PRIOR == 0.0
    assert values["move_rate"] is None
