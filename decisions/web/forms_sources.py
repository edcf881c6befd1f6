"""Forms of the study-source, outcome and portfolio pages: the shape of what was typed.

As in ``decisions.web.forms``, the rules about content (a likelihood table, a
record's state and signal, a path through the tree, a finite realised value)
belong to the services and the valuation core; numbers are read leniently
(``9,000,000``, a typographic minus) and anything that does not read as a
number is passed on as typed, so the service's own message names it.
"""

from __future__ import annotations

from django import forms

from decisions.services.sources import ACCURACY_MODES
from decisions.web.editor import _number

__all__ = ["ApplySourceForm", "ClaimGrid", "OutcomeForm", "RecordForm", "SourceCreateForm",
           "UploadForm", "as_number", "split_names"]

#: The browser keeps an uploaded file in the session between preview and import; a
#: larger track record goes through the API or the ``import_records`` command.
WEB_IMPORT_MAX_BYTES = 1024 * 1024


def as_number(text: str):
    """A float or int when the text reads as one, else the text (for the service to name)."""
    if text is None or not str(text).strip():
        return None
    return _number(str(text))


def split_names(text: str) -> list[str]:
    """``"hot, cold"`` or one name a line -> ``["hot", "cold"]`` (blanks dropped)."""
    parts = [p.strip() for line in (text or "").splitlines() for p in line.split(",")]
    return [p for p in parts if p]


class SourceCreateForm(forms.Form):
    team = forms.TypedChoiceField(coerce=int, label="Team")
    name = forms.CharField(max_length=200, label="Name",
                           help_text="The firm or method, e.g. a survey company's name.")
    states = forms.CharField(label="True states", help_text="Comma-separated, e.g. hot, cold.")
    signals = forms.CharField(label="Signals the study gives",
                              help_text="Comma-separated, at least two, e.g. favourable, "
                                        "unfavourable.")
    prior_strength = forms.CharField(required=False, label="Prior strength",
                                     help_text="How many past studies of each state the claim "
                                               "is worth (empty: 10).")

    def __init__(self, *args, teams=(), **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["team"].choices = [(t.pk, t.name) for t in teams]
        self.fields["prior_strength"].widget.attrs.update({"inputmode": "decimal",
                                                           "class": "narrow"})


class ClaimGrid:
    """The claimed table typed as cells ``claim-<i>-<j>``: P(signal j | state i).

    Built from the POST (or blank); ``table()`` is the mapping the service
    takes; ``attach`` puts the service's problems (``claimed['hot']['good']``,
    ``claimed['hot']``) beside the cell or the row they name.
    """

    def __init__(self, states: list[str], signals: list[str], data=None):
        self.states, self.signals = states, signals
        data = data or {}
        self.values = {(i, j): str(data.get(f"claim-{i}-{j}", "")).strip()
                       for i in range(len(states)) for j in range(len(signals))}
        self.cell_errors: dict[tuple[int, int], list[str]] = {}
        self.row_errors: dict[int, list[str]] = {}
        self.general: list[str] = []

    def table(self) -> dict:
        return {s: {k: as_number(self.values[(i, j)]) for j, k in enumerate(self.signals)}
                for i, s in enumerate(self.states)}

    def attach(self, problems) -> list[tuple[str, str]]:
        """Place the claimed-table problems; return the others untouched."""
        where_cell = {f"claimed[{s!r}][{k!r}]": (i, j) for i, s in enumerate(self.states)
                      for j, k in enumerate(self.signals)}
        where_row = {f"claimed[{s!r}]": i for i, s in enumerate(self.states)}
        rest = []
        for location, message in problems:
            if location in where_cell:
                self.cell_errors.setdefault(where_cell[location], []).append(
                    f"{location}: {message}")
            elif location in where_row:
                self.row_errors.setdefault(where_row[location], []).append(
                    f"{location}: {message}")
            elif location == "claimed":
                self.general.append(f"{location}: {message}")
            else:
                rest.append((location, message))
        return rest

    @property
    def has_errors(self) -> bool:
        return bool(self.cell_errors or self.row_errors or self.general)

    def rows(self) -> list[dict]:
        return [{"state": s, "index": i, "errors": self.row_errors.get(i, []),
                 "cells": [{"name": f"claim-{i}-{j}", "id": f"f-claim-{i}-{j}",
                            "value": self.values[(i, j)],
                            "label": f"Claimed P({k} | {s})", "cls": "narrow",
                            "errors": self.cell_errors.get((i, j), [])}
                           for j, k in enumerate(self.signals)]}
                for i, s in enumerate(self.states)]


class RecordForm(forms.Form):
    date = forms.CharField(label="Date of the study", max_length=10,
                           help_text="YYYY-MM-DD; not in the future.")
    signal = forms.ChoiceField(label="What the study said")
    state = forms.ChoiceField(label="What came true")
    note = forms.CharField(required=False, max_length=5000, label="Note",
                           widget=forms.Textarea(attrs={"rows": 2}))

    def __init__(self, *args, source=None, **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["date"].widget.attrs.update({"class": "narrow-text",
                                                 "placeholder": "YYYY-MM-DD"})
        if source is not None:
            self.fields["signal"].choices = [("", "—")] + [(s, s) for s in source.signals]
            self.fields["state"].choices = [("", "—")] + [(s, s) for s in source.states]


class UploadForm(forms.Form):
    file = forms.FileField(label="Records CSV",
                           help_text="Columns date, signal, state (a header line first); "
                                     f"at most {WEB_IMPORT_MAX_BYTES // 1024:,} KiB here.")

    def clean_file(self):
        upload = self.cleaned_data["file"]
        if upload.size > WEB_IMPORT_MAX_BYTES:
            raise forms.ValidationError(
                f"file: larger than {WEB_IMPORT_MAX_BYTES:,} bytes ({upload.size:,} bytes sent); "
                "import a larger file through the API or the import_records command")
        return upload


class ApplySourceForm(forms.Form):
    etag = forms.CharField(widget=forms.HiddenInput)
    study = forms.ChoiceField(label="Study")
    source = forms.TypedChoiceField(coerce=int, label="Source")
    mode = forms.ChoiceField(choices=[(m, f"{m} accuracy") for m in ACCURACY_MODES],
                             initial="claimed", widget=forms.RadioSelect, label="Take its")

    def __init__(self, *args, studies=(), sources=(), **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["study"].choices = [(s, s) for s in studies]
        self.fields["source"].choices = [(s.pk, s.name) for s in sources]


class OutcomeForm(forms.Form):
    """Realised value, signal and note; one select per chance node is added by the view."""

    etag = forms.CharField(widget=forms.HiddenInput)
    study_signal = forms.ChoiceField(required=False, label="Signal the study gave",
                                     help_text="Only if a study was bought; it must match the "
                                               "branch recorded at the study's signal node.")
    realised_value = forms.CharField(label="Realised value",
                                     help_text="Money actually made (or lost, with a minus).")
    note = forms.CharField(required=False, max_length=5000, label="Note",
                           widget=forms.Textarea(attrs={"rows": 3}))

    def __init__(self, *args, nodes=(), signals=(), **kwargs):
        super().__init__(*args, **kwargs)
        self.node_fields: list[tuple[str, dict]] = []
        for i, node in enumerate(nodes):
            name = f"node-{i}"
            self.fields[name] = forms.ChoiceField(
                required=False, label=node["label"],
                choices=[("", "— not reached —"), *node["branches"]])
            self.node_fields.append((name, node))
        self.fields["study_signal"].choices = [("", "— no study bought —")] + [
            (s, s) for s in signals]
        self.fields["realised_value"].widget.attrs.update({"inputmode": "decimal",
                                                           "class": "narrow-text"})

    def path(self) -> dict[str, str]:
        return {node["id"]: self.cleaned_data[name] for name, node in self.node_fields
                if self.cleaned_data.get(name)}

    def field_for_node(self, node_id: str) -> str | None:
        return next((name for name, node in self.node_fields if node["id"] == node_id), None)

    def on_plan(self):
        return [self[name] for name, node in self.node_fields if node["on_plan"]]

    def off_plan(self):
        return [self[name] for name, node in self.node_fields if not node["on_plan"]]

    def off_plan_touched(self) -> bool:
        """Whether an off-plan select holds a value or an error (its group then opens)."""
        return any(field.errors or field.value() for field in self.off_plan())
