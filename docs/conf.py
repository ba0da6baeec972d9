"""Sphinx configuration: the API reference from the docstrings, the pages in Markdown (MyST).

Build: ``sphinx-build -W --keep-going -b html docs docs/_build`` (what .ci/run does),
with mottle importable (``scripts/test`` or ``pip install -e ".[docs]"``).
"""

from __future__ import annotations

import mottle

project = "mottle"
copyright = "mottle authors"  # noqa: A001 (Sphinx's name)
version = release = mottle.__version__

extensions = ["sphinx.ext.autodoc", "sphinx.ext.napoleon", "myst_parser"]
source_suffix = {".md": "markdown", ".rst": "restructuredtext"}
root_doc = "index"
exclude_patterns = ["_build"]

# Every documented object is named by its public path (mottle.propagate), so moving a
# module inside the package does not change the pages.
autodoc_default_options = {"members": True, "member-order": "bysource"}
autodoc_typehints = "signature"
autoclass_content = "class"
napoleon_google_docstring = False
napoleon_numpy_docstring = True

# GitHub-style anchors for the headings, so that the same links work on GitHub and here.
myst_heading_anchors = 3
myst_enable_extensions = ["colon_fence"]

html_theme = "furo"
html_title = f"mottle {release}"


def setup(app):
    """The ``mottle-kinds FAMILY`` directive: an autodoc entry for every spec class registered in
    that family (mottle.specs.kinds), so a new kind appears in the reference without editing it."""
    from sphinx.util.docutils import SphinxDirective

    from mottle.specs import kinds

    class Kinds(SphinxDirective):
        required_arguments = 1

        def run(self):
            # MyST around reStructuredText: the directive is used in the Markdown pages, and
            # autodoc's output is reStructuredText.
            lines = ["```{eval-rst}"]
            for cls in kinds.kinds(self.arguments[0]).values():
                public = getattr(mottle, cls.__name__, None) is cls
                lines.append(f".. autoclass:: {'mottle' if public else cls.__module__}.{cls.__name__}")
            return self.parse_text_to_nodes("\n".join([*lines, "```"]))

    app.add_directive("mottle-kinds", Kinds)
    return {"parallel_read_safe": True}
