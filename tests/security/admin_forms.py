"""Read an admin page's form the way a browser would submit it, so tests can change one field and post."""

from __future__ import annotations

from html.parser import HTMLParser


class _FormReader(HTMLParser):
    """Collects the submittable values of the page's form with id ``form_id`` (admin: ``<model>_form``)."""

    def __init__(self, form_id: str) -> None:
        super().__init__()
        self.form_id = form_id
        self.inside = False
        self.values: dict[str, list[str]] = {}
        self._select: str | None = None
        self._select_multiple = False
        self._textarea: str | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: (v or "") for k, v in attrs}
        if tag == "form":
            self.inside = a.get("id") == self.form_id
            return
        if not self.inside:
            return
        name = a.get("name")
        if tag == "input" and name and "disabled" not in a:
            kind = a.get("type", "text")
            if kind in ("checkbox", "radio"):
                if "checked" in a:
                    self.values.setdefault(name, []).append(a.get("value", "on"))
            elif kind not in ("submit", "button", "file", "image", "reset"):
                self.values.setdefault(name, []).append(a.get("value", ""))
        elif tag == "select" and name:
            self._select, self._select_multiple = name, "multiple" in a
            self.values.setdefault(name, [])
        elif tag == "option" and self._select and "selected" in a:
            self.values[self._select].append(a.get("value", ""))
        elif tag == "textarea" and name:
            self._textarea = name
            self.values[name] = [""]

    def handle_endtag(self, tag: str) -> None:
        if tag == "form":
            self.inside = False
        elif tag == "select":
            self._select = None
        elif tag == "textarea" and self._textarea:
            # Browsers drop the one newline that follows <textarea>; Django writes it.
            self.values[self._textarea][0] = self.values[self._textarea][0].removeprefix("\n")
            self._textarea = None

    def handle_data(self, data: str) -> None:
        if self._textarea:
            self.values[self._textarea][0] += data


def form_values(html: bytes | str, form_id: str) -> dict[str, list[str]]:
    """Field name → submitted values of the form ``form_id`` in ``html`` (a select with nothing chosen is [])."""
    reader = _FormReader(form_id)
    reader.feed(html.decode() if isinstance(html, bytes) else html)
    if not reader.values:
        raise AssertionError(f"no form with id {form_id!r} and fields on the page")
    return reader.values


def select_options(html: bytes | str, field_name: str) -> list[str]:
    """The option values offered by the select named ``field_name`` (the admin's drop-downs and multi-selects)."""

    class _Options(HTMLParser):
        def __init__(self) -> None:
            super().__init__()
            self.inside = False
            self.found = False
            self.options: list[str] = []

        def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
            a = {k: (v or "") for k, v in attrs}
            if tag == "select":
                self.inside = a.get("name") == field_name
                self.found = self.found or self.inside
            elif tag == "option" and self.inside:
                self.options.append(a.get("value", ""))

        def handle_endtag(self, tag: str) -> None:
            if tag == "select":
                self.inside = False

    parser = _Options()
    parser.feed(html.decode() if isinstance(html, bytes) else html)
    if not parser.found:
        raise AssertionError(f"no select named {field_name!r} on the page")
    return parser.options
