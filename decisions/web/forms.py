"""Forms of the browser face: they check the shape of what was typed.

The rules about content (a title's length, who may sign, the model document)
belong to the services and the valuation core; the views show their messages
beside the fields named by each problem's location.
"""

from __future__ import annotations

from django import forms

from decisions.models import SIGNING_ROLES, Meaning

__all__ = ["CloseForm", "DecisionCreateForm", "PolicyForm", "SignForm", "StrategyForm",
           "add_problems"]


def add_problems(form: forms.Form, problems) -> None:
    """Attach a service's ``(location, message)`` problems to the form's fields.

    A location naming a field lands beside it; anything else (``status``,
    ``If-Match``) becomes a form-wide error, shown above the form.
    """
    for location, message in problems:
        field = location.split(".", 1)[0].split("[", 1)[0] if location else None
        if field in form.fields:
            form.add_error(field, message)
        else:
            form.add_error(None, f"{location}: {message}" if location else message)


class PolicyFields(forms.Form):
    """One count per signing role; zero means the role does not sign."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        for role in SIGNING_ROLES:
            self.fields[_policy_field(role)] = forms.IntegerField(
                label=f"{role.label} sign-offs", min_value=0, max_value=10, initial=0,
                required=False,
                help_text="How many people of this role must approve (0: none).")

    def requirements(self) -> dict[str, int]:
        return {str(role): self.cleaned_data[_policy_field(role)] or 0
                for role in SIGNING_ROLES if self.cleaned_data.get(_policy_field(role))}

    def policy_fields(self):
        return [self[_policy_field(role)] for role in SIGNING_ROLES]


def _policy_field(role) -> str:
    return "policy_" + str(role).replace(" ", "_")


class DecisionCreateForm(PolicyFields):
    title = forms.CharField(max_length=200, label="Title",
                            help_text="What is to be decided, in a few words.")
    team = forms.TypedChoiceField(coerce=int, label="Team")
    kind = forms.ChoiceField(label="Model form", choices=[
        ("payoff_table", "Payoff table: states, alternatives, payoffs, studies"),
        ("tree", "General tree, edited as JSON"),
    ], initial="payoff_table", widget=forms.RadioSelect)

    field_order = ("title", "team", "kind")

    def __init__(self, *args, teams=(), **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["team"].choices = [(t.pk, t.name) for t in teams]

    def clean(self):
        data = super().clean()
        if not self.errors and not self.requirements():
            self.add_error(None, "policy: name at least one signing role with a count of 1 or more")
        return data


class PolicyForm(PolicyFields):
    etag = forms.CharField(widget=forms.HiddenInput)


class SignForm(forms.Form):
    etag = forms.CharField(widget=forms.HiddenInput)
    version = forms.IntegerField(widget=forms.HiddenInput)
    meaning = forms.ChoiceField(choices=Meaning.choices, widget=forms.RadioSelect,
                                label="Your sign-off", initial=Meaning.APPROVE)
    reason = forms.CharField(required=False, widget=forms.Textarea(attrs={"rows": 3}),
                             label="Reason", help_text="Required when you reject.")
    password = forms.CharField(widget=forms.PasswordInput(attrs={"autocomplete": "current-password"}),
                               label="Your password, again",
                               help_text="Signing asks for your own password at the moment you sign.")


class StrategyForm(forms.Form):
    CHOICES = (("recommended", "Take the recommended plan"),
               ("alternative", "Take another alternative of the model"),
               ("own", "Take the team's own plan (described below)"))
    etag = forms.CharField(widget=forms.HiddenInput)
    choice = forms.ChoiceField(choices=CHOICES, widget=forms.RadioSelect, initial="recommended",
                               label="Plan")
    alternative = forms.ChoiceField(required=False, label="Alternative")
    plan_text = forms.CharField(required=False, label="The team's own plan",
                                widget=forms.Textarea(attrs={"rows": 2}))
    value_given_up = forms.FloatField(required=False, label="Expected value given up",
                                      help_text="Only for the team's own plan; for an alternative "
                                                "of the model it is computed from the results.")
    justification = forms.CharField(required=False, label="Justification",
                                    widget=forms.Textarea(attrs={"rows": 3}),
                                    help_text="Required unless the recommended plan is taken.")

    def __init__(self, *args, alternatives=(), **kwargs):
        super().__init__(*args, **kwargs)
        self.fields["alternative"].choices = [("", "—")] + [(a, a) for a in alternatives]


class CloseForm(forms.Form):
    etag = forms.CharField(widget=forms.HiddenInput)
    note = forms.CharField(required=False, label="Closing note",
                           widget=forms.Textarea(attrs={"rows": 2}))
