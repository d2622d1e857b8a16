"""Write a validation run: score tables, the standing JSON, figures and a summary with the caution."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from slipnet.figures.validation import plot_reliability, plot_validation_scores
from slipnet.reports.writer import Outputs, markdown_table
from slipnet.validation.reference import REFERENCE_STATEMENT
from slipnet.validation.standing import standing

__all__ = ["standing_lines", "write_validation"]


def standing_lines(st: dict) -> list[str]:
    """Markdown lines of a standing dict: the statement, the targets table and the calibration."""
    lines = [f"**{st['statement']}**", ""]
    lines.append(f"Held-out seeds {st['provenance']['held_out_seeds']}; weights fitted on seeds "
                 f"{st['provenance'].get('training_seeds')} (fitted {st['provenance'].get('weights_fitted_on')}).")
    lines += ["", "Targets (held-out specimens, mean over specimens):", ""]
    rows = [[t["text"], f"{t['value']:.3f}", f"{t['threshold']:g}", "met" if t["met"] else "MISSED"]
            for t in st["targets"]]
    lines.append(markdown_table(pd.DataFrame(rows, columns=["target", "value", "threshold", "status"])))
    lines += ["", "Calibration of the forecast probabilities (Brier score; base rate = always forecasting the "
              "observed rate):", ""]
    rows = [[c["predictor"], c["kind"], c["source"], str(c["n"]), f"{c['event_rate']:.3f}",
             f"{c['mean_probability']:.3f}", f"{c['brier']:.4f}", f"{c['brier_base_rate']:.4f}"]
            for c in st["calibration"]]
    lines.append(markdown_table(pd.DataFrame(rows, columns=["predictor", "event", "source", "n", "event rate",
                                                            "mean p", "Brier", "base-rate Brier"])))
    return lines


def write_validation(result, folder: str | os.PathLike, *, figures: bool = True,
                     title: str = "Validation of the forecast") -> dict[str, Path]:
    """Write ``scores``, ``summary``, ``calibration`` and ``cases`` tables, ``standing.json``, figures and
    ``summary.md`` (which states that the reference is slipnet's own model and ends with the caution)."""
    out = Outputs(folder)
    out.table("scores", result.scores, "validation_scores.csv")
    out.table("summary_table", result.summary, "validation_summary.csv")
    out.table("calibration", result.calibration, "validation_calibration.csv")
    out.table("cases", result.cases, "validation_cases.csv")
    st = standing(result)
    out.json("standing", st, "standing.json")
    if figures:
        out.figure("scores_png", plot_validation_scores(result.summary), "validation_scores.png")
        out.figure("reliability_png", plot_reliability(st["calibration"]), "validation_reliability.png")
    piv = result.summary.pivot(index="predictor", columns="metric", values="mean")
    sd = result.summary.pivot(index="predictor", columns="metric", values="sd")
    cols = ["auc_slip", "auc_fip", "grain_rho", "site_hit_rate", "barrier_rho", "path_share", "seconds"]
    rows = [[p, *(f"{piv.loc[p, c]:.3f} ± {sd.loc[p, c]:.3f}" for c in cols)] for p in piv.index]
    lines = [REFERENCE_STATEMENT, "", "Mean ± sd over held-out specimens:", ""]
    lines.append(markdown_table(pd.DataFrame(rows, columns=["predictor", *cols])))
    lines += ["", *standing_lines(st)]
    out.summary(title, lines)
    return out.files
