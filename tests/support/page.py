"""A report page read back with the standard library's ``html.parser`` (the reference parser
the page tests use)."""

from __future__ import annotations

from html.parser import HTMLParser


class Page(HTMLParser):
    """Tags, image sources, section ids and visible text of a page."""

    def __init__(self, text: str):
        super().__init__(convert_charrefs=True)
        self.tags: list[str] = []
        self.images: list[str] = []
        self.links: list[str] = []
        self.ids: list[str] = []
        self.text: list[str] = []
        self.feed(text)
        self.close()

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.tags.append(tag)
        values = dict(attrs)
        if tag == "img":
            self.images.append(values["src"] or "")
        if tag == "a" and values.get("href"):
            self.links.append(values["href"] or "")
        if values.get("id"):
            self.ids.append(values["id"] or "")

    def handle_data(self, data: str) -> None:
        self.text.append(data)

    @property
    def words(self) -> str:
        return " ".join(" ".join(self.text).split())
