"""The result of ``icgen check``: rows (measured, predicted, standard error, verdict per
bin), the whole result with its terminal table, and its files (JSON, and the PNG of
:mod:`icgen.diagnostics.report_plots`)."""
import os
from dataclasses import asdict, dataclass, field

import numpy as np

from ..textout import format_table
from .json_report import write_json
from .report_plots import plot_report

__all__ = ["Comparison", "CheckResult", "row", "write_outputs"]


@dataclass
class Comparison:
    """One row of the check: a measured quantity in bins against its prediction.

    ``error`` is the standard error of each measured value; a bin passes when
    |measured - predicted| <= limit * error. ``x`` holds bin centres (kpc) or indices.
    """
    quantity: str
    component: str
    unit: str
    x: list
    measured: list
    predicted: list
    error: list
    tested: list
    limit: float
    prediction: str
    labels: list = field(default_factory=list)

    def deviations(self):
        m, p, e = (np.asarray(a, float) for a in (self.measured, self.predicted, self.error))
        with np.errstate(invalid="ignore", divide="ignore"):
            d = (m - p) / e
        return np.where(np.asarray(self.tested, bool), d, np.nan)

    def worst(self):
        """(index, deviation in errors) of the worst tested bin; (None, nan) if none."""
        d = self.deviations()
        if np.all(np.isnan(d)):
            return None, float("nan")
        i = int(np.nanargmax(np.abs(d)))
        return i, float(d[i])

    @property
    def passed(self):
        d = self.deviations()
        d = d[~np.isnan(d)]
        return bool(np.all(np.abs(d) <= self.limit))

    def to_dict(self):
        out = asdict(self)
        out["deviation"] = [None if np.isnan(v) else float(v) for v in self.deviations()]
        out["passed"] = self.passed
        return out


@dataclass
class CheckResult:
    """All rows of a check, the settings and timings."""
    model: str
    path: str | None
    n_sigma: float
    particles: dict
    kinds: dict
    frame: dict
    settings: dict
    rows: list = field(default_factory=list)
    timing: dict = field(default_factory=dict)

    @property
    def passed(self):
        return all(r.passed for r in self.rows)

    def failed(self):
        """(quantity, component) of every failed row."""
        return [(r.quantity, r.component) for r in self.rows if not r.passed]

    def to_dict(self):
        return {"model": self.model, "path": self.path, "n_sigma": self.n_sigma,
                "passed": self.passed, "particles": self.particles, "kinds": self.kinds,
                "frame": self.frame,
                "settings": self.settings, "timing": self.timing,
                "rows": [r.to_dict() for r in self.rows]}

    def write_json(self, path):
        write_json(self.to_dict(), path)

    def format_table(self):
        """The terminal table: one line per row, its worst bin, and the verdict."""
        headers = ["quantity", "component", "bins", "worst dev", "at", "measured",
                   "predicted", "unit", "status"]
        rows = []
        for r in self.rows:
            i, d = r.worst()
            shown_only = not any(r.tested)
            if shown_only:      # a row only shown: its largest value
                i = int(np.argmax(np.abs(np.asarray(r.measured, float))))
            where = "" if i is None else (r.labels[i] if r.labels else f"{r.x[i]:.3g}")
            shown = (lambda v: "" if i is None else f"{v[i]:.4g}")
            status = "shown" if shown_only else ("pass" if r.passed else "FAIL")
            rows.append([r.quantity, r.component, f"{sum(r.tested)}/{len(r.tested)}",
                         "-" if shown_only or i is None else f"{d:+.2f} err", where,
                         shown(r.measured), shown(r.predicted), r.unit, status])
        n_fail = len(self.failed())
        title = (f"icgen check: {self.model}" + (f" ({self.path})" if self.path else "")
                 + f"; tolerance {self.n_sigma:g} standard errors per bin")
        verdict = ("all checks pass" if n_fail == 0
                   else f"{n_fail} of {len(self.rows)} checks FAIL")
        vec = lambda v: "(" + ", ".join(f"{c:+.3g}" for c in v) + ")"
        where = (f"measured about the galaxy's centre, found at {vec(self.frame['position_kpc'])}"
                 f" kpc and {vec(self.frame['velocity_kms'])} km/s in the file (icgen.frame)")
        return format_table(headers, rows, title=title) + "\n" + where + "\n" + verdict


def row(quantity, component, unit, x, measured, predicted, error, tested, limit,
         prediction, labels=()):
    """A :class:`Comparison` from arrays or scalars (stored as lists of floats and
    bools)."""
    as_list = lambda a: [float(v) for v in np.atleast_1d(np.asarray(a, float))]
    return Comparison(quantity, component, unit, as_list(x), as_list(measured),
                      as_list(predicted), as_list(error),
                      [bool(t) for t in np.atleast_1d(tested)], float(limit), prediction,
                      list(labels))


def write_outputs(result, json_path=None, report_dir=None):
    """Write the JSON file and/or the report folder (check.json, check.png); returns the
    paths written."""
    written = []
    if json_path:
        result.write_json(json_path)
        written.append(str(json_path))
    if report_dir:
        os.makedirs(report_dir, exist_ok=True)
        path = os.path.join(report_dir, "check.json")
        result.write_json(path)
        written.append(path)
        written.append(plot_report(result, os.path.join(report_dir, "check.png")))
    return written
