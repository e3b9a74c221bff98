"""The README's key table is the schema's own (regenerate with `shearmix keys --markdown`)."""
import io
import os
from contextlib import redirect_stdout

from shearmix.tools.cli import main

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))


def test_readme_key_table_matches_schema():
    buf = io.StringIO()
    with redirect_stdout(buf):
        assert main(["keys", "--markdown"]) == 0
    text = open(os.path.join(ROOT, "README.md"), encoding="utf-8").read()
    start = text.index("-->", text.index("<!-- keys:begin")) + 3
    block = text[start:text.index("<!-- keys:end -->")].strip()
    assert block == buf.getvalue().strip()


def test_readme_opens_with_job_paragraph_and_two_commands():
    text = open(os.path.join(ROOT, "README.md"), encoding="utf-8").read()
    assert "scripts/demo" in text and "scripts/test" in text
    first = text.split("\n\n")[1]
    assert "shear" in first and "low-Péclet" in first
