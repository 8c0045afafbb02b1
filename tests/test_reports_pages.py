"""The check page's HTML, read back with html.parser (the HTML Living Standard's tokeniser rules,
as Python's standard library implements them).
"""

from __future__ import annotations

from html.parser import HTMLParser

from service.reports import pages


class _StyleText(HTMLParser):
    """The raw text of every <style> element (the HTML standard: style content is raw text, so
    character references are *not* decoded there)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=False)
        self.text = ""
        self._inside = False

    def handle_starttag(self, tag, attrs):
        self._inside = tag == "style"

    def handle_endtag(self, tag):
        self._inside = False

    def handle_data(self, data):
        if self._inside:
            self.text += data


def test_style_sheet_is_not_html_escaped():
    """Inside <style> "&#34;" stays literal, which breaks the font stack and the sort arrows."""
    parser = _StyleText()
    parser.feed(pages.check_page({"id": "chk_x", "status": "queued"}))
    assert '"DejaVu Sans"' in parser.text and "&#34;" not in parser.text
    parser = _StyleText()
    parser.feed(pages.batch_page({"id": "bat_x"}, [], lambda item: None))
    assert 'content:" \\2195"' in parser.text
