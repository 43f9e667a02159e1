"""Planner forms. The randomization inputs are generated from ``render.budget.FIELDS`` (unit, bounds, help),
never written by hand (switches, ``kind == "bool"``, are checkboxes); quotas are one row per object class (target 0 =
not in the campaign) with its own thresholds, empty meaning the budget's acceptance default.

Forms only parse and lay out input: the rules live in ``services.normalize_campaign_budget`` /
``services.create_campaign``; their errors (:class:`campaigns.services.CampaignError`, structured: field →
message) are put on the field they name.
"""

from __future__ import annotations

from collections.abc import Sequence
from decimal import Decimal
from typing import TYPE_CHECKING, Any

from django import forms
from django.conf import settings
from django.forms.utils import pretty_name

from assets.models import Asset, ObjectClass
from campaigns import services
from campaigns.models import Campaign
from evenframe.inputs import InputError
from render.budget import DEFAULT_BUDGET, FIELDS, FIELDS_BY_KEY, Field
from teams.permissions import PLANNER, teams_for

if TYPE_CHECKING:
    from teams.models import Team

SECTION_TITLES = {
    "render": ("Render settings", "Image size and path-tracing quality; cost grows linearly with pixels × samples."),
    "variation": (
        "Variation budget",
        "How many distinct layouts, lighting variants per layout and camera views per "
        "lighting the campaign walks through; frames sharing a layout share its room and furniture.",
    ),
    "thresholds": ("Acceptance defaults", "Used for every class unless its quota row says otherwise."),
    "room": ("Room", "Sampled per layout."),
    "lighting": ("Lighting", "Sampled per lighting variant."),
    "camera": ("Camera", "Sampled per view."),
    "appearance": (
        "Appearance",
        "Procedural textures on surfaces (how often a surface wears one, how many variants "
        "there are, their size) and unlabelled clutter (books, vases, rugs, pictures…) per frame.",
    ),
}
# A quota error's column (the QuotaInput attribute the service names) → the quota row's input.
QUOTA_COLUMNS = {
    "target_accepted": "target",
    "min_visible_fraction": "visible",
    "min_box_px": "box",
    "min_contrast": "contrast",
}
SECTION_ORDER = ("render", "variation", "thresholds", "room", "lighting", "camera", "appearance")
UNIT_TEXT = {"": "", "1/m²": "per m²"}
# Field names carry their unit (units in names); the label shows the unit beside it instead.
UNIT_SUFFIXES = ("_per_m2", "_px", "_mm", "_m", "_lm", "_k", "_deg", "_lux", "_s", "_ev", "_electrons")
LABEL_OVERRIDES = {
    "spp": "samples per pixel",
    "cct_k": "colour temperature (CCT)",
    "iso": "ISO",
    "f_number": "f-number",
    "max_depth": "max path depth",
    "eye_height_m": "camera (eye) height",
}


def field_label(field: Field) -> str:
    if field.name in LABEL_OVERRIDES:
        return LABEL_OVERRIDES[field.name]
    name = field.name
    for suffix in UNIT_SUFFIXES:
        if name.endswith(suffix):
            name = name[: -len(suffix)]
            break
    return name.replace("_", " ")


def _display(value: Any) -> Any:
    """2000 rather than 2000.0 in the inputs."""
    return int(value) if isinstance(value, float) and value.is_integer() else value


def budget_field_name(field: Field, part: str = "") -> str:
    return f"b_{field.section}_{field.name}" + (f"_{part}" if part else "")


def _step(field: Field) -> str:
    if field.kind in ("int", "int_range"):
        return "1"
    return "any"


def budget_value(budget: dict[str, Any], field: Field) -> Any:
    """The stored value, or the default for a field added after the campaign was saved (the render core merges
    a stored budget over the same defaults, so that is what its frames use)."""
    section = budget.get(field.section) or {}
    return section[field.name] if field.name in section else DEFAULT_BUDGET[field.section][field.name]


def budget_form_data(budget: dict[str, Any]) -> dict[str, Any]:
    """The planner form's POST fields for ``budget`` (a field it lacks at its default): what :meth:`CampaignForm.clean`
    reads back. A switch that is on is ``"on"``, one that is off is absent (a browser sends nothing for it)."""
    data: dict[str, Any] = {}
    for field in FIELDS:
        value = budget_value(budget, field)
        if field.kind == "bool":
            if value:
                data[budget_field_name(field)] = "on"
        elif field.kind == "choices":
            data[budget_field_name(field)] = list(value)
        elif field.kind in ("range", "int_range"):
            data[budget_field_name(field, "min")], data[budget_field_name(field, "max")] = value
        else:
            data[budget_field_name(field)] = value
    return data


def _switch_field(label: str, initial: bool) -> forms.Field:
    """A budget switch (``Field.kind == "bool"``): a checkbox; unchecked is absent from a POST, so False."""
    return forms.BooleanField(
        label=label, required=False, initial=bool(initial), widget=forms.CheckboxInput(attrs={"class": "switch"})
    )


def _choices_field(field: Field, label: str, initial: list[str]) -> forms.Field:
    """A budget choice list (``Field.kind == "choices"``): one checkbox per choice, at least one ticked."""
    return forms.MultipleChoiceField(
        label=label,
        required=True,
        initial=list(initial),
        choices=[(c, c.replace("_", " ")) for c in field.choices],
        widget=forms.CheckboxSelectMultiple(attrs={"class": "choices"}),
        error_messages={"required": "Choose at least one."},
    )


def _model_choice_field(form: forms.Form, name: str) -> forms.ModelChoiceField[Any]:
    """The form's field ``name``, declared on the form class as a model choice field (``form.fields`` holds
    plain ``Field``s as far as the type checker knows)."""
    field = form.fields[name]
    if not isinstance(field, forms.ModelChoiceField):
        raise TypeError(f"{type(form).__name__}.{name} is a {type(field).__name__}, not a ModelChoiceField")
    return field


def _number_field(field: Field, label: str, initial: Any) -> forms.Field:
    attrs = {"step": _step(field), "min": f"{field.lower:g}", "max": f"{field.upper:g}", "class": "num"}
    if field.kind in ("int", "int_range"):
        return forms.IntegerField(
            label=label,
            min_value=int(field.lower),
            max_value=int(field.upper),
            initial=initial,
            widget=forms.NumberInput(attrs=attrs),
        )
    return forms.FloatField(
        label=label,
        min_value=field.lower,
        max_value=field.upper,
        initial=initial,
        widget=forms.NumberInput(attrs=attrs),
    )


class _AssetChoiceField(forms.ModelMultipleChoiceField):
    """Assets labelled with their class, name and origin (procedural, or the team that uploaded them)."""

    def label_from_instance(self, obj: Asset) -> str:
        return _asset_choice_label(obj)


class CampaignForm(forms.Form):
    name = forms.CharField(max_length=200)
    team: forms.ModelChoiceField[Team] = forms.ModelChoiceField(
        queryset=None, empty_label=None, help_text="Campaigns go to a team you plan in."
    )
    description = forms.CharField(required=False, widget=forms.Textarea(attrs={"rows": 2}))
    seed = forms.IntegerField(
        min_value=0, max_value=services.MAX_SEED, initial=0, help_text="Root seed: same seed, same frames."
    )
    cost_budget = forms.DecimalField(
        min_value=0,
        max_digits=14,
        decimal_places=2,
        initial=Decimal("100.00"),
        help_text="Most the campaign may spend, fixed costs included.",
    )
    price_per_cpu_hour = forms.DecimalField(
        min_value=0, max_digits=10, decimal_places=4, initial=Decimal("0.05"), label="Price per CPU-hour"
    )
    setup_cost = forms.DecimalField(
        min_value=0,
        max_digits=12,
        decimal_places=2,
        initial=Decimal("0"),
        help_text="One-off cost of planning and checking the campaign.",
    )
    manual_labelling_rate_per_hour = forms.DecimalField(
        min_value=0,
        max_digits=10,
        decimal_places=2,
        initial=Decimal("12.00"),
        label="Manual labelling rate per hour",
        help_text="Hourly rate of annotators, for the comparison with labelling by hand.",
    )
    weight = forms.IntegerField(
        min_value=1,
        max_value=services.MAX_WEIGHT,
        initial=1,
        help_text="Share of the fleet relative to other running campaigns.",
    )
    max_attempts = forms.IntegerField(
        min_value=1, max_value=services.MAX_ATTEMPTS, initial=3, help_text="Attempts per frame before it is dead."
    )

    assets = _AssetChoiceField(
        queryset=None,
        required=False,
        widget=forms.CheckboxSelectMultiple,
        label="Assets",
        help_text="What the campaign's objects may be: procedural generators and your team's uploads. Only the "
        "assets of classes with a target are used; an upload is used only where it is ticked, and only "
        "by a campaign of its own team.",
    )
    # Present in every rendering of the form: tells an untouched asset list (a client that never showed it) from
    # one whose boxes were all cleared.
    assets_shown = forms.BooleanField(required=False, widget=forms.HiddenInput, initial=True)

    COST_FIELDS = ("cost_budget", "price_per_cpu_hour", "setup_cost", "manual_labelling_rate_per_hour")
    RUN_FIELDS = ("seed", "weight", "max_attempts")

    def __init__(
        self, *args: Any, user: Any, campaign: Campaign | None = None, source: Campaign | None = None, **kwargs: Any
    ) -> None:
        """``campaign``: edit that draft. ``source``: a new campaign that starts as a copy of it (every setting,
        a free copy name, its team preselected)."""
        super().__init__(*args, **kwargs)
        _label_with_currency(self, *self.COST_FIELDS)
        self.campaign = campaign
        prefill = campaign or source
        budget = prefill.budget if prefill else DEFAULT_BUDGET
        if campaign is not None:
            del self.fields["team"]  # a campaign stays in its team
        else:
            _model_choice_field(self, "team").queryset = teams_for(user=user, role=PLANNER)
        if prefill is not None:
            for key in (
                "name",
                "description",
                "seed",
                "cost_budget",
                "price_per_cpu_hour",
                "setup_cost",
                "manual_labelling_rate_per_hour",
                "weight",
                "max_attempts",
            ):
                self.fields[key].initial = getattr(prefill, key)
        if source is not None and campaign is None:
            self.fields["name"].initial = services.copy_name(campaign=source)
            self.fields["team"].initial = source.team_id
            self.fields["seed"].help_text = (
                f"Root seed: same seed, same frames. This is the seed of “{source.name}”: where the settings agree, "
                "the copy renders the same scenes; give another seed for new ones."
            )
        self._init_assets(user=user, campaign=campaign, chosen=prefill)
        # Known sections in their order, then any section the render core adds (titled from its key), so a new
        # budget section shows up in the form instead of breaking it.
        self.budget_rows: dict[str, list[dict[str, Any]]] = {s: [] for s in SECTION_ORDER}
        for field in FIELDS:
            self.budget_rows.setdefault(field.section, [])
        for field in FIELDS:
            value = budget_value(budget, field)
            unit = UNIT_TEXT.get(field.unit, field.unit)
            label = field_label(field)
            row: dict[str, Any] = {
                "field": field,
                "unit": unit,
                "label": label,
                "help": field.help,
                "bounds": f"{field.lower:g}–{field.upper:g}{(' ' + unit) if unit else ''}",
                "switch": field.kind == "bool",
            }
            if field.kind == "bool":
                name = budget_field_name(field)
                self.fields[name] = _switch_field(label, value)
                row["names"] = [name]
            elif field.kind == "choices":
                name = budget_field_name(field)
                self.fields[name] = _choices_field(field, label, value)
                row["names"] = [name]
                row["choices"] = True
            elif field.kind in ("range", "int_range"):
                lo, hi = budget_field_name(field, "min"), budget_field_name(field, "max")
                self.fields[lo] = _number_field(field, f"{label} min", _display(value[0]))
                self.fields[hi] = _number_field(field, f"{label} max", _display(value[1]))
                row["names"] = [lo, hi]
            else:
                name = budget_field_name(field)
                self.fields[name] = _number_field(field, label, _display(value))
                row["names"] = [name]
            self.budget_rows[field.section].append(row)
        quotas = {}
        if prefill is not None:
            quotas = {q.object_class.name: q for q in prefill.quotas.select_related("object_class")}
        self.quota_rows: list[dict[str, Any]] = []
        contrast_field = FIELDS_BY_KEY["thresholds", "min_contrast"]
        for oc in ObjectClass.objects.order_by("name"):
            q = quotas.get(oc.name)
            names = (f"q_{oc.name}_target", f"q_{oc.name}_visible", f"q_{oc.name}_box", f"q_{oc.name}_contrast")
            self.fields[names[0]] = forms.IntegerField(
                label=f"{oc.label or oc.name} target",
                required=False,
                min_value=0,
                max_value=services.MAX_TARGET_ACCEPTED,
                initial=q.target_accepted if q else 0,
                widget=forms.NumberInput(attrs={"class": "num", "min": 0, "step": 1}),
            )
            self.fields[names[1]] = forms.FloatField(
                label=f"{oc.label or oc.name} min visible fraction",
                required=False,
                min_value=0,
                max_value=1,
                initial=q.min_visible_fraction if q else None,
                widget=forms.NumberInput(
                    attrs={"class": "num", "min": 0, "max": 1, "step": "any", "placeholder": "default"}
                ),
            )
            self.fields[names[2]] = forms.FloatField(
                label=f"{oc.label or oc.name} min box",
                required=False,
                min_value=0,
                max_value=4096,
                initial=q.min_box_px if q else None,
                widget=forms.NumberInput(attrs={"class": "num", "min": 0, "step": "any", "placeholder": "default"}),
            )
            # Empty takes the budget's thresholds.min_contrast (the acceptance default below the quotas).
            self.fields[names[3]] = forms.FloatField(
                label=f"{oc.label or oc.name} min contrast",
                required=False,
                min_value=contrast_field.lower,
                max_value=contrast_field.upper,
                initial=_display(q.min_contrast) if q else None,
                widget=forms.NumberInput(
                    attrs={
                        "class": "num",
                        "min": f"{contrast_field.lower:g}",
                        "max": f"{contrast_field.upper:g}",
                        "step": "any",
                        "placeholder": "default",
                    }
                ),
            )
            self.quota_rows.append({"object_class": oc, "names": names})

    def _init_assets(self, *, user: Any, campaign: Campaign | None, chosen: Campaign | None) -> None:
        """Offer the shared procedural library and the uploads of the campaign's team (a new campaign: of every
        team the user plans in; the service refuses another team's). Preselected: the choice of ``chosen`` (the
        campaign, or the copy's source), or the defaults of :func:`campaigns.services.default_campaign_assets`
        for every class."""
        from django.db.models import Q

        team_ids = (
            [campaign.team_id]
            if campaign is not None
            else list(teams_for(user=user, role=PLANNER).values_list("pk", flat=True))
        )
        queryset = (
            Asset.objects.filter(Q(team__isnull=True) | Q(team_id__in=team_ids))
            .select_related("object_class", "team")
            .order_by("object_class__name", "kind", "name")
        )
        field = _model_choice_field(self, "assets")
        field.queryset = queryset
        if chosen is not None:
            field.initial = list(chosen.assets.values_list("pk", flat=True))
        else:
            class_names = list(ObjectClass.objects.values_list("name", flat=True))
            owner_ids: Sequence[int | None] = team_ids or [None]  # None: the shared procedural library
            field.initial = [
                a.pk
                for team_id in owner_ids
                for a in services.default_campaign_assets(team_id=team_id, class_names=class_names)
            ]

    # --- layout helpers for the template ---------------------------------------------------------------------

    def sections(self) -> list[dict[str, Any]]:
        out = []
        for key in (k for k, rows in self.budget_rows.items() if rows):
            title, intro = SECTION_TITLES.get(key, (key.replace("_", " ").capitalize(), ""))
            rows = [{**row, "bound": [self[n] for n in row["names"]]} for row in self.budget_rows[key]]
            out.append({"key": key, "title": title, "intro": intro, "rows": rows})
        return out

    def quota_table(self) -> list[dict[str, Any]]:
        return [
            {
                "object_class": r["object_class"],
                "target": self[r["names"][0]],
                "visible": self[r["names"][1]],
                "box": self[r["names"][2]],
                "contrast": self[r["names"][3]],
            }
            for r in self.quota_rows
        ]

    def cost_fields(self) -> list[forms.BoundField]:
        return [self[n] for n in self.COST_FIELDS]

    def run_fields(self) -> list[forms.BoundField]:
        return [self[n] for n in self.RUN_FIELDS]

    # --- parsing ---------------------------------------------------------------------------------------------

    def clean(self) -> dict[str, Any]:
        data = super().clean()
        if data is None:  # Form.clean() returns cleaned_data; Django keeps cleaned_data when a clean() returns None
            data = self.cleaned_data
        budget: dict[str, dict[str, Any]] = {}
        complete = True
        for field in FIELDS:
            if field.kind == "bool":
                value: Any = bool(data.get(budget_field_name(field)))  # an unchecked box is absent: False
            elif field.kind == "choices":
                value = data.get(budget_field_name(field))
                if not value:
                    complete = False
                    continue
            elif field.kind in ("range", "int_range"):
                lo = data.get(budget_field_name(field, "min"))
                hi = data.get(budget_field_name(field, "max"))
                if lo is None or hi is None:
                    complete = False
                    continue
                value = [lo, hi]
            else:
                value = data.get(budget_field_name(field))
                if value is None:
                    complete = False
                    continue
            budget.setdefault(field.section, {})[field.name] = value
        quotas = []
        for row in self.quota_rows:
            target = data.get(row["names"][0])
            if target:
                quotas.append(
                    services.QuotaInput(
                        row["object_class"].name,
                        int(target),
                        data.get(row["names"][1]),
                        data.get(row["names"][2]),
                        data.get(row["names"][3]),
                    )
                )
        if not quotas and not any(n in self.errors for r in self.quota_rows for n in r["names"]):
            self.add_error(None, "Give at least one class a target above 0.")
        data["quotas"] = quotas
        quoted = {q.class_name for q in quotas}
        team = self.campaign.team if self.campaign is not None else data.get("team")
        team_id = getattr(team, "pk", None)
        # None: the page never showed the list (an older client or a script), so the service picks the defaults.
        # Another team's uploads (offered when the user plans in several teams) do not go with this campaign.
        data["asset_ids"] = (
            [a.pk for a in data.get("assets") or [] if a.object_class.name in quoted and a.team_id in (None, team_id)]
            if data.get("assets_shown")
            else None
        )
        if complete:
            try:
                data["budget"] = services.normalize_campaign_budget(budget)
            except services.CampaignError as exc:
                self.add_service_error(exc)
        return data

    def add_service_error(self, exc: InputError) -> None:
        """Put a service's error on the input it names: its ``field``, a quota row's column, or a budget input
        (``budget_field``: section, name and the end of a range). Anything else is an error of the whole form."""
        field = getattr(exc, "field", "")
        message = getattr(exc, "message", str(exc))
        if field == "quota" and isinstance(exc, services.CampaignError) and exc.class_name is not None:
            key = f"q_{exc.class_name}_{QUOTA_COLUMNS.get(exc.column, 'target')}"
            if key in self.fields:
                self.add_error(key, message)
                return
        elif field == "budget" and isinstance(exc, services.CampaignError) and exc.budget_field:
            section, name, part = exc.budget_field
            budget_field = FIELDS_BY_KEY.get((section, name))
            if budget_field is not None:
                if budget_field.kind in ("range", "int_range"):
                    key = budget_field_name(budget_field, part or "min")
                else:
                    key = budget_field_name(budget_field)
                if key in self.fields:
                    self.add_error(key, exc.detail)
                    return
        elif field in self.fields:
            self.add_error(field, message)
            return
        self.add_error(None, str(exc))

    def service_kwargs(self) -> dict[str, Any]:
        d = self.cleaned_data
        return {
            "name": d["name"],
            "quotas": d["quotas"],
            "budget": d["budget"],
            "cost_budget": d["cost_budget"],
            "price_per_cpu_hour": d["price_per_cpu_hour"],
            "setup_cost": d["setup_cost"],
            "manual_labelling_rate_per_hour": d["manual_labelling_rate_per_hour"],
            "weight": d["weight"],
            "seed": d["seed"],
            "max_attempts": d["max_attempts"],
            "description": d.get("description", ""),
            "asset_ids": d.get("asset_ids"),
        }


def _asset_choice_label(asset: Asset) -> str:
    if asset.kind == Asset.Kind.MESH:
        owner = f" (upload, {asset.team.name})" if asset.team is not None else " (upload)"
    else:
        owner = " (procedural)"
    return f"{asset.object_class.name}: {asset.name}{owner}"


def _label_with_currency(form: forms.Form, *names: str) -> None:
    """ "Cost budget (EUR)": amounts are typed in ``settings.CURRENCY`` (the number is stored as typed)."""
    for name in names:
        field = form.fields[name]
        field.label = f"{field.label or pretty_name(name)} ({settings.CURRENCY})"


class CostBudgetForm(forms.Form):
    cost_budget = forms.DecimalField(min_value=0, max_digits=14, decimal_places=2)


class NotificationForm(forms.Form):
    """Where a campaign's notifications go (checked again by :func:`campaigns.services.set_notifications`)."""

    notify_url = forms.CharField(
        required=False,
        max_length=500,
        label="Webhook URL",
        help_text="http:// or https://; each event is POSTed as signed JSON. Empty: no webhook.",
        widget=forms.URLInput(attrs={"placeholder": "https://ci.example.org/hooks/frames", "size": 60}),
    )
    notify_emails = forms.CharField(
        required=False,
        max_length=1000,
        label="E-mail addresses",
        help_text="Separated by spaces or commas; up to 10. Empty: no e-mail.",
        widget=forms.TextInput(attrs={"size": 60}),
    )
    failure_alert_pct = forms.FloatField(
        min_value=0,
        max_value=100,
        label="Failure alert (%)",
        help_text="Notify when this share of the latest 50 finished frames (from 10 on) is dead; 0 turns it off.",
        widget=forms.NumberInput(attrs={"class": "num", "step": "any", "min": 0, "max": 100}),
    )


class ExtendForm(forms.Form):
    """New targets for a started campaign's quotas (never below today's) and classes it may add, plus its budget.

    ``rows``: per class, its field, the target and accepted count today (None for a class not quoted yet)."""

    cost_budget = forms.DecimalField(min_value=0, max_digits=14, decimal_places=2, label="Cost budget")

    def __init__(self, *args: Any, campaign: Campaign, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        _label_with_currency(self, "cost_budget")
        self.fields["cost_budget"].initial = campaign.cost_budget
        quotas = {q.object_class.name: q for q in campaign.quotas.select_related("object_class")}
        self.rows: list[dict[str, Any]] = []
        for oc in ObjectClass.objects.order_by("name"):
            quota = quotas.get(oc.name)
            name = f"t_{oc.name}"
            self.fields[name] = forms.IntegerField(
                label=f"{oc.label or oc.name} target",
                min_value=quota.target_accepted if quota else 0,
                max_value=services.MAX_TARGET_ACCEPTED,
                initial=quota.target_accepted if quota else 0,
                required=False,
                widget=forms.NumberInput(attrs={"class": "num", "step": 1}),
            )
            self.rows.append(
                {
                    "class_name": oc.name,
                    "label": oc.label or oc.name,
                    "field": self[name],
                    "target": quota.target_accepted if quota else None,
                    "accepted": quota.accepted_count if quota else None,
                }
            )
        self.rows.sort(key=lambda row: (row["target"] is None, row["label"]))  # the campaign's classes first
        self._quoted = {name: q.target_accepted for name, q in quotas.items()}

    def targets(self) -> dict[str, int]:
        """Changed targets only: raised quotas and new classes with a target above 0."""
        out = {}
        for row in self.rows:
            value = self.cleaned_data.get(f"t_{row['class_name']}")
            if value is None:
                continue
            if value != self._quoted.get(row["class_name"], 0):
                out[row["class_name"]] = value
        return out


class AssetUploadForm(forms.Form):
    UNITS = (
        ("auto", "guess from size"),
        ("m", "metres"),
        ("cm", "centimetres"),
        ("mm", "millimetres"),
        ("in", "inches"),
    )
    name = forms.CharField(max_length=128)
    team: forms.ModelChoiceField[Team] = forms.ModelChoiceField(queryset=None, empty_label=None)
    object_class = forms.ModelChoiceField(
        queryset=ObjectClass.objects.order_by("name"), empty_label=None, to_field_name="name", label="Class"
    )
    AXES = (("+z", "+z"), ("+y", "+y (glTF)"), ("-z", "−z"), ("-y", "−y"), ("+x", "+x"), ("-x", "−x"))
    FRONTS = (
        ("", "default (+y for a z-up file, +z for a y-up file)"),
        ("+y", "+y"),
        ("-y", "−y"),
        ("+z", "+z"),
        ("-z", "−z"),
        ("+x", "+x"),
        ("-x", "−x"),
    )
    LOOKS = (("keep", "keep the model's look (its materials and textures)"), ("randomize", "randomize its colours"))
    mesh = forms.FileField(
        help_text="OBJ, PLY, STL or GLB; an OBJ with its MTL and images (or a glTF with its "
        "files) as one .zip. The format is read from the file's content."
    )
    unit = forms.ChoiceField(choices=UNITS, initial="auto")
    # Not required: a client that does not send them gets the defaults (+z up, the look kept).
    up_axis = forms.ChoiceField(
        choices=AXES,
        initial="+z",
        required=False,
        label="Up axis",
        help_text="The file's axis that points up in the room.",
    )
    front = forms.ChoiceField(
        choices=FRONTS,
        initial="",
        required=False,
        label="Front",
        help_text="The file's axis the model's front faces (a clock's dial, a sofa's seat); "
        "wall items hang with it towards the room.",
    )
    look = forms.ChoiceField(choices=LOOKS, initial="keep", required=False, label="Look")
    creation_cost = forms.DecimalField(
        min_value=0,
        max_digits=12,
        decimal_places=2,
        initial=Decimal("0"),
        help_text="One-off cost of modelling or licensing it.",
    )

    def __init__(self, *args: Any, user: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        _model_choice_field(self, "team").queryset = teams_for(user=user, role=PLANNER)
        _label_with_currency(self, "creation_cost")

    def add_service_error(self, exc: Exception) -> None:
        """Put a service's error on the input it names (``name``, ``team``, ``object_class``, …), else on the form."""
        field = getattr(exc, "field", "")
        if field and field in self.fields:
            self.add_error(field, getattr(exc, "message", str(exc)))
        else:
            self.add_error(None, str(exc))
