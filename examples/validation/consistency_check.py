"""Score the forecast against slipnet's own cyclic crystal-plasticity model on small virtual experiments.

The harness draws notched synthetic specimens with a short crack from the notch root (every setting
from stated ranges, fixed seeds), solves the slow cyclic model on each as the reference, runs the fast
forecast and four baselines, and scores them all the same way: pixel ROC AUC of the localisation
field against the reference's hottest 10 % of accumulated slip and of FIP, grain Spearman ρ, top-5
site hit rate, barrier ranking and path agreement. This script shrinks the specimens to 36 × 36
points so it runs in seconds: it fits the map-only weights on three training seeds into a temporary
file, scores two other seeds, and writes the report (tables, standing JSON, figures) into a
temporary folder. The reference is slipnet's own model: a consistency test between a fast and a
slow model, not a validation against experiments. The full run is ``slipnet validate``.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

from slipnet.reports.validation import write_validation
from slipnet.validation import CaseRanges, ReferenceSettings, fit_weights, run_validation, write_weights


def main() -> None:
    small = CaseRanges(shape=(36, 36), horizon_um=60.0, grain_size_um=(18.0, 24.0), notch_depth_um=(20.0, 24.0),
                       notch_radius_um=(6.0, 8.0), crack_length_um=(4.0, 8.0))
    quick = ReferenceSettings(cycles=1, max_slip_increment=1e-3)
    folder = Path(tempfile.mkdtemp(prefix="slipnet-validate-"))
    w = fit_weights((11, 12, 13), modes=("map",), ranges=small, reference=quick, cache_dir=folder / "cache",
                    points_per_case=800, n_sites=6, n_bootstrap=3)
    weights = write_weights(w, folder / "weights.json")
    res = run_validation((24, 25), modes=("map",), ranges=small, reference=quick, cache_dir=folder / "cache",
                         weights=weights, samples=0, scheduler="synchronous")
    print(res.statement)
    print(res.summary.pivot(index="predictor", columns="metric", values="mean")[
        ["auc_slip", "auc_fip", "grain_rho", "site_hit_rate"]].round(3).to_string())
    write_validation(res, folder / "report")
    print(f"report written to {folder / 'report'}")


if __name__ == "__main__":
    main()
