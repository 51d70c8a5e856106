"""A small element tree of an HTML page (stdlib html.parser), enough to find elements by tag,
id, class and attribute, and read their text, so tests check what the page says, not its bytes."""

from collections.abc import Iterator
from dataclasses import dataclass, field
from html.parser import HTMLParser

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}


@dataclass
class Element:
    tag: str
    attrs: dict[str, str]
    children: list["Element | str"] = field(default_factory=list)

    def walk(self) -> Iterator["Element"]:
        yield self
        for child in self.children:
            if isinstance(child, Element):
                yield from child.walk()

    def find_all(self, tag: str | None = None, **attrs: str) -> list["Element"]:
        """Descendants (and self) with this tag and these attribute values; `class_` matches one class."""
        found = []
        for element in self.walk():
            if tag is not None and element.tag != tag:
                continue
            wanted = {k.rstrip("_").replace("_", "-"): v for k, v in attrs.items()}
            classes = element.attrs.get("class", "").split()
            if all((v in classes) if k == "class" else element.attrs.get(k) == v for k, v in wanted.items()):
                found.append(element)
        return found

    def find(self, tag: str | None = None, **attrs: str) -> "Element":
        found = self.find_all(tag, **attrs)
        assert found, f"no <{tag}> with {attrs}"
        return found[0]

    def by_id(self, element_id: str) -> "Element":
        return self.find(id=element_id)

    @property
    def text(self) -> str:
        parts: list[str] = []
        for child in self.children:
            parts.append(child if isinstance(child, str) else child.text)
        return " ".join("".join(parts).split())


class _Builder(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.root = Element("#document", {})
        self.stack = [self.root]

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        element = Element(tag, {k: v or "" for k, v in attrs})
        self.stack[-1].children.append(element)
        if tag not in VOID:
            self.stack.append(element)

    def handle_startendtag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self.stack[-1].children.append(Element(tag, {k: v or "" for k, v in attrs}))

    def handle_endtag(self, tag: str) -> None:
        for depth in range(len(self.stack) - 1, 0, -1):
            if self.stack[depth].tag == tag:
                del self.stack[depth:]
                return

    def handle_data(self, data: str) -> None:
        self.stack[-1].children.append(data)


def parse(html: str) -> Element:
    builder = _Builder()
    builder.feed(html)
    builder.close()
    return builder.root


def value_of(element: Element) -> str:
    """The exact number a cell carries in its <data value="...">."""
    return element.find("data").attrs["value"]
