"""The dashboard's "write the report" and "save a screenshot" destinations (no Textual here).

Both go into the study's ``reports/`` folder, so what the PI takes away sits beside the data it
describes, whatever the account's download folder is (or whether it has one).
"""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

REPORTS_DIR = "reports"


def reports_dir(study_dir: Path) -> Path:
    """The study's reports folder, made when missing (raises FieldslopeError with one sentence)."""
    from fieldslope.common.errors import FieldslopeError

    folder = Path(study_dir) / REPORTS_DIR
    try:
        folder.mkdir(exist_ok=True)
    except OSError as exc:
        raise FieldslopeError(f"{folder}: cannot make the reports folder ({exc.strerror}); ask for write access "
                              "to the study folder.") from None
    return folder


def write_study_report(study_dir: Path, *, bootstrap: int, seed: int | None) -> tuple[Path, Path, int]:
    """Write ``reports/report-<time>.html`` and the pictures into ``reports/figures-<time>/``.

    Returns (page, figures folder, number of pictures). Runs in a worker thread; opens its own
    read-only store connection.
    """
    from fieldslope.schemas.study import Study
    from fieldslope.tui import report as page

    folder = reports_dir(study_dir)
    stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
    target, figures = folder / f"report-{stamp}.html", folder / f"figures-{stamp}"
    with Study.open(study_dir, readonly=True) as study:
        result = page.build(study, page.Options(bootstrap=bootstrap, seed=seed, png=True))
    count = page.write(result, target, figures)
    return target, figures, count
