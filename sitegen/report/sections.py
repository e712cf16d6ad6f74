"""The dataset page, section by section: the one ordered list of its section templates.

A dataset page (``templates/dataset.html``) is the breadcrumbs, then each section below in this order, then the
links to the neighbouring datasets. A section is one template, ``templates/sections/<name>.html``; it reads the
typed fields of :class:`sitegen.report.dataset_view.DatasetView` (``v``, and ``r``, the same view's
``FitReport``) and nothing else: no parsing of message text, no reaching into chart specifications.

To add a section: write ``themes/default/templates/sections/<name>.html`` (start from a neighbour; it decides
itself whether it has something to say, e.g. ``{% if r.claims %}``), then add ``Section("<name>", ...)`` to
:data:`DATASET_SECTIONS` where it belongs on the page, with the purposes it is for if not all. If it needs a
value the report does not hold as it is, add a typed field to ``DatasetView`` and compute it in
``dataset_view.view``. A user theme overrides one section by shipping a file of the same name in its own
``templates/sections/``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

Shown = Literal["always", "fitted", "failed"]
"""When a section is on the page: on every page, only when the dataset was fitted, or only when it failed."""


@dataclass(frozen=True, slots=True)
class Section:
    """One section of the dataset page: its template's name and when it is shown."""

    name: str
    shown: Shown = "fitted"
    purposes: tuple[str, ...] = ()  # shown only for datasets of these purposes (sidecar ``purpose``); () for all

    @property
    def template(self) -> str:
        return f"sections/{self.name}.html"


DATASET_SECTIONS: tuple[Section, ...] = (
    Section("heading", "always"),  # title, status, source file, tags
    Section("description", "always"),  # the sidecar's Markdown description
    Section("provenance", "always"),  # when built, from which input (SHA-256), who is responsible
    Section("failure", "failed"),  # why the dataset could not be fitted
    Section("glance", "fitted"),  # the fit in one sentence and four figures
    Section("requirements", "fitted"),  # the declared acceptance criteria, met or not
    Section("excluded", "fitted"),  # rows the sidecar leaves out, with their reasons
    Section("notes", "fitted"),  # warnings and notes that no check below restates
    Section("comparison", "fitted", ("comparison",)),  # what a method comparison leads with
    Section("calibration", "fitted", ("calibration",)),  # what a calibration leads with (includes "inverse")
    Section("trust", "fitted"),  # the model checks and their verdicts
    Section("line", "fitted"),  # the line chart with its bands
    Section("estimates", "fitted"),  # coefficients, then the line as a whole in sentences
    Section("claims", "fitted"),  # declared hypotheses and their tests
    Section("lines", "fitted"),  # other lines through the same points
    Section("inverse", "fitted", ("relation", "comparison")),  # inverse predictions, detection limits
    Section("predictions", "fitted"),  # predicted values at chosen points
    Section("groups", "fitted"),  # one line per group
    Section("residuals", "fitted"),  # each residual chart beside the checks it supports
    Section("flagged", "fitted"),  # rows past the influence cut-offs
    Section("anova", "fitted"),  # where the variation goes: the analysis of variance from the total down
    Section("method", "always"),  # how this page was made
    Section("downloads", "always"),  # the dataset's files
)


def shown_sections(failed: bool, purpose: str) -> tuple[Section, ...]:
    """The sections of a page whose dataset failed (``failed``) or was fitted, for its purpose, in page order."""
    wanted = "failed" if failed else "fitted"
    return tuple(
        s for s in DATASET_SECTIONS if s.shown in ("always", wanted) and (not s.purposes or purpose in s.purposes)
    )
