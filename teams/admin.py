"""Admin for teams and memberships, and the mixin that scopes every admin class and inline to the user's teams."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any, ClassVar

from django import forms
from django.contrib import admin, messages
from django.contrib.auth import get_user_model
from django.core.exceptions import ImproperlyConfigured, ValidationError
from django.db import IntegrityError
from django.db.models import Field, ForeignKey, IntegerField, ManyToManyField, QuerySet
from django.db.models.fields.related import RelatedField
from django.forms.models import BaseInlineFormSet
from django.http import HttpRequest, HttpResponse, HttpResponseRedirect

from teams.models import Membership, Team
from teams.permissions import (
    ADMIN,
    PLANNER,
    VIEWER,
    has_role,
    may_change_membership,
    membership_change_errors,
    scope_by_team,
    team_id_of,
    teams_for,
)


class RowIdsField(forms.ModelMultipleChoiceField):
    """A multi-select that refuses, as an invalid choice, an integer id no database row can have.

    SQLite raises OverflowError (a server error) for an integer beyond 64 bits in an ``IN`` list; Django already
    turns such values into "no match" for single-row lookups.
    """

    def clean(self, value: Any) -> Any:
        if self.queryset is None:  # the admin's formfield_for_manytomany always passes one
            raise ImproperlyConfigured("RowIdsField needs a queryset")
        key_field = (
            self.queryset.model._meta.pk
            if not self.to_field_name
            else (self.queryset.model._meta.get_field(self.to_field_name))
        )
        if isinstance(key_field, IntegerField) and isinstance(value, (list, tuple)):
            for item in value:
                try:
                    number = int(str(item))
                except ValueError:
                    continue  # not a number at all: the parent class refuses it with its own message
                if not -(2**63) <= number < 2**63:
                    raise ValidationError(
                        self.error_messages["invalid_choice"], code="invalid_choice", params={"value": item}
                    )
        return super().clean(value)


if TYPE_CHECKING:
    from django.contrib.admin.options import BaseModelAdmin
    from django_stubs_ext import StrOrPromise

    class _AdminBase(BaseModelAdmin[Any]):
        """What the mixins below reach through ``super()``: the admin options every admin class and inline has,
        a ``ModelAdmin``'s form, form view and messages, an ``InlineModelAdmin``'s formset. A mixin is combined
        with one of the two; each method is only called on the kind of class that has it."""

        def get_form(self, request: HttpRequest, obj: Any = None, change: bool = False, **kwargs: Any) -> Any: ...

        def changeform_view(
            self,
            request: HttpRequest,
            object_id: str | None = None,
            form_url: str = "",
            extra_context: dict[str, Any] | None = None,
        ) -> HttpResponse: ...

        def message_user(
            self,
            request: HttpRequest,
            message: StrOrPromise,
            level: int | str = messages.INFO,
            extra_tags: str = "",
            fail_silently: bool = False,
        ) -> None: ...

        def get_formset(self, request: HttpRequest, obj: Any = None, **kwargs: Any) -> Any: ...
else:
    _AdminBase = object


class TeamScopedAdminMixin(_AdminBase):
    """Rows, drop-downs and forms of an admin class or inline, limited to the signed-in user's teams.

    - Lists and change pages show only rows of the user's teams (and shared rows), through
      ``teams.permissions.scope_by_team``.
    - Every foreign-key and many-to-many widget offers only rows of teams where the user holds ``choice_role``
      (plus shared rows, and every row of reference data no team owns). The form field validates a posted id
      against the same queryset, so another team's id is refused as "not one of the available choices".
    - A model's optional team (empty = shared with every team) is required for everyone but superusers: only
      superusers create shared rows.
    - Forms and inline formsets get the user as ``request_user``, for rules that compare fields.

    Superusers see and pick everything.
    """

    choice_role: ClassVar[str] = PLANNER

    def get_queryset(self, request: HttpRequest) -> QuerySet:
        return scope_by_team(super().get_queryset(request), user=request.user, role=VIEWER)

    def _scoped_choices(self, db_field: RelatedField, request: HttpRequest, kwargs: dict[str, Any]) -> QuerySet:
        queryset = kwargs.get("queryset")
        if queryset is None:
            db = kwargs.get("using")
            queryset = self.get_field_queryset(db, db_field, request)
            if queryset is None:
                queryset = db_field.remote_field.model._default_manager.using(db)
        return scope_by_team(queryset, user=request.user, role=self.choice_role)

    def formfield_for_foreignkey(self, db_field: ForeignKey, request: HttpRequest, **kwargs: Any) -> Any:
        kwargs["queryset"] = self._scoped_choices(db_field, request, kwargs)
        if db_field.related_model is Team and db_field.null and not request.user.is_superuser:
            kwargs["required"] = True
        return super().formfield_for_foreignkey(db_field, request, **kwargs)

    def formfield_for_manytomany(self, db_field: ManyToManyField, request: HttpRequest, **kwargs: Any) -> Any:
        kwargs["queryset"] = self._scoped_choices(db_field, request, kwargs)
        kwargs.setdefault("form_class", RowIdsField)
        return super().formfield_for_manytomany(db_field, request, **kwargs)

    def get_form(self, request: HttpRequest, obj: Any = None, change: bool = False, **kwargs: Any) -> Any:
        form = super().get_form(request, obj, change=change, **kwargs)
        form.request_user = request.user  # a class made for this request by modelform_factory
        return form

    def changeform_view(
        self,
        request: HttpRequest,
        object_id: str | None = None,
        form_url: str = "",
        extra_context: dict[str, Any] | None = None,
    ) -> HttpResponse:
        """The admin's add and change pages, answering a lost race on a unique value with a message, not a 500.

        The form checks unique values (a team's name, a campaign's name in its team…) before the save; two saves
        of the same value at the same moment both pass that check and the database refuses the second. The
        admin's own transaction has rolled the whole save back by then, so nothing was written.
        """
        try:
            return super().changeform_view(request, object_id, form_url, extra_context)
        except IntegrityError:
            if request.method != "POST":  # only a save can lose that race
                raise
            self.message_user(
                request,
                "Not saved: another save took the same name (or another value that must be "
                "unique) a moment ago. Nothing was changed; check the values and save again.",
                level=messages.ERROR,
            )
            return HttpResponseRedirect(request.get_full_path())

    def get_formset(self, request: HttpRequest, obj: Any = None, **kwargs: Any) -> Any:
        formset = super().get_formset(request, obj, **kwargs)
        formset.request_user = formset.form.request_user = request.user  # classes made for this request
        return formset


class TeamScopedAdmin(TeamScopedAdminMixin, admin.ModelAdmin):
    """Staff who are not superusers see only their teams' rows, change them as planners and delete them as admins.

    Rows no team owns (shared procedural assets, object classes) are changed and deleted by superusers only: they
    are every team's.
    """

    def has_change_permission(self, request: HttpRequest, obj: Any = None) -> bool:
        allowed = super().has_change_permission(request, obj)
        if obj is None or not allowed:
            return allowed
        return self._has_team_role(request, obj, PLANNER)

    def has_delete_permission(self, request: HttpRequest, obj: Any = None) -> bool:
        allowed = super().has_delete_permission(request, obj)
        if obj is None or not allowed:
            return allowed
        return self._has_team_role(request, obj, ADMIN)

    @staticmethod
    def _has_team_role(request: HttpRequest, obj: Any, role: str) -> bool:
        team_id = team_id_of(obj)
        if team_id is None:
            return request.user.is_superuser
        return has_role(user=request.user, team=team_id, role=role)


class MemberField(forms.ModelChoiceField):
    """An account named by its exact user name: a text box, never a list of every account on the site.

    Adding people is what team admins are for, so any account may be named; nobody sees who else exists.
    """

    widget = forms.TextInput
    default_error_messages = {"invalid_choice": "There is no account with that user name."}

    def __init__(self, **kwargs: Any) -> None:
        user_model = get_user_model()
        kwargs.setdefault("help_text", "The member's exact user name.")
        super().__init__(queryset=user_model._default_manager.all(), to_field_name=user_model.USERNAME_FIELD, **kwargs)

    def prepare_value(self, value: Any) -> Any:
        if isinstance(value, int) and not isinstance(value, bool):  # a saved membership's user id
            queryset, to_field_name = self.queryset, self.to_field_name
            if queryset is None or to_field_name is None:  # both are set in __init__
                raise ImproperlyConfigured("MemberField needs its queryset and to_field_name")
            return queryset.filter(pk=value).values_list(to_field_name, flat=True).first() or ""
        return super().prepare_value(value)


class MembershipAdminForm(forms.ModelForm):
    """Membership rules of ``teams.permissions.membership_change_errors``, checked on every new or changed row."""

    request_user: Any = None

    class Meta:
        model = Membership
        fields = ("team", "user", "role")

    def clean(self) -> dict[str, Any]:
        data = super().clean()
        if (
            data is None
        ):  # ModelForm.clean() returns cleaned_data; Django keeps cleaned_data when a clean() returns None
            data = self.cleaned_data
        if self.request_user is None or (self.instance.pk is not None and not self.has_changed()):
            return data
        team = data.get("team") if "team" in self.fields else None
        if team is None and "team" not in self.fields and self.instance.team_id is not None:
            team = self.instance.team  # an inline row: the team is the page's team
        errors = membership_change_errors(
            user=self.request_user,
            team=team,
            member=data.get("user"),
            role=data.get("role", ""),
            current=self.instance if self.instance.pk is not None else None,
        )
        for field, message in errors.items():
            target = field if field in self.fields else None
            if target is None or target not in self.errors:
                self.add_error(target, message)
        return data


class MembershipInlineFormSet(BaseInlineFormSet):
    request_user: Any = None

    def clean(self) -> None:
        super().clean()
        if self.request_user is None or not self.can_delete:
            return
        for form in self.initial_forms:
            removed = getattr(form, "cleaned_data", {}).get("DELETE")
            if removed and not may_change_membership(user=self.request_user, membership=form.instance):
                raise ValidationError("You cannot remove your own membership; another admin of the team can.")


class MembershipFieldsMixin(_AdminBase):
    """The membership form for both the membership admin and the team page's inline: the user by name."""

    form: type[forms.ModelForm[Any]] = MembershipAdminForm  # the admin options' type, shared with the inline
    choice_role: ClassVar[str] = ADMIN  # members are managed by the team's admins

    def formfield_for_dbfield(self, db_field: Field, request: HttpRequest, **kwargs: Any) -> Any:
        if db_field.name == "user":
            return MemberField(label="User", required=True)
        return super().formfield_for_dbfield(db_field, request, **kwargs)


class MembershipInline(MembershipFieldsMixin, TeamScopedAdminMixin, admin.TabularInline):
    model = Membership
    formset = MembershipInlineFormSet
    extra = 1


@admin.register(Team)
class TeamAdmin(TeamScopedAdminMixin, admin.ModelAdmin):
    """Team admins rename their team and manage its members; creating and deleting teams is for superusers
    (deleting a team removes every membership, the deleting admin's own included)."""

    list_display = ("name", "created_at")
    inlines = [MembershipInline]

    def has_add_permission(self, request: HttpRequest) -> bool:
        return request.user.is_active and request.user.is_superuser

    def has_change_permission(self, request: HttpRequest, obj: Team | None = None) -> bool:
        allowed = super().has_change_permission(request, obj)
        if obj is None or not allowed:
            return allowed
        return has_role(user=request.user, team=obj, role=ADMIN)

    def has_delete_permission(self, request: HttpRequest, obj: Team | None = None) -> bool:
        return request.user.is_active and request.user.is_superuser


@admin.register(Membership)
class MembershipAdmin(MembershipFieldsMixin, TeamScopedAdminMixin, admin.ModelAdmin):
    """Members of a team see its memberships; its admins add, change and remove them, except their own."""

    list_display = ("team", "user", "role")
    list_filter = ("role",)

    def has_add_permission(self, request: HttpRequest) -> bool:
        return super().has_add_permission(request) and (
            request.user.is_superuser or teams_for(user=request.user, role=ADMIN).exists()
        )

    def has_change_permission(self, request: HttpRequest, obj: Membership | None = None) -> bool:
        allowed = super().has_change_permission(request, obj)
        if obj is None or not allowed:
            return allowed
        return may_change_membership(user=request.user, membership=obj)

    def has_delete_permission(self, request: HttpRequest, obj: Membership | None = None) -> bool:
        allowed = super().has_delete_permission(request, obj)
        if obj is None or not allowed:
            return allowed
        return may_change_membership(user=request.user, membership=obj)
