"""The printed examples in the README are what the commands print today."""

import importlib.util
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _make_examples():
    spec = importlib.util.spec_from_file_location(
        "make_examples", ROOT / "docs" / "examples" / "make_examples.py"
    )
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_readme_examples_match_what_the_commands_print():
    mk = _make_examples()
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = {m.group("name"): m.group("body") for m in mk._BLOCK.finditer(readme)}
    assert set(blocks) == set(mk.EXAMPLES), "every example has its block in the README"
    current = mk.run_examples()
    for name, text in current.items():
        assert blocks[name] == text, (
            f"README example '{name}' no longer matches the command's output; "
            "run python docs/examples/make_examples.py"
        )


def test_column_reference_is_written_from_the_vocabulary():
    mk = _make_examples()
    assert (ROOT / "docs" / "columns.md").read_text(encoding="utf-8") == mk.columns_markdown()


def test_a_changed_output_is_caught():
    mk = _make_examples()
    readme = "x\n<!-- example: analyse -->\n```\nold\n```\n<!-- end example -->\ny\n"
    new = mk.render(readme, {"analyse": "```\nnew\n```\n"})
    assert new != readme and "new" in new and new.startswith("x\n") and new.endswith("y\n")
