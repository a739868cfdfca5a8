"""Sphinx configuration for lincomb's documentation.

Build (offline, warnings are errors) from the repository root::

    python -m sphinx -W --keep-going -b html docs docs/_build/html

The API reference is written from the package itself: at the start of every build this file
writes one page per public namespace (``lincomb``, ``lincomb.errors``, ``lincomb.datasets``,
``lincomb.plot``) listing each name of its ``__all__``, and autosummary gives every name its own
page.  When the build finishes, every name must have been documented; a missing one is a build
warning, so an error under ``-W``.  The worked notebooks under ``notebooks/`` are copied in
(their saved files carry no outputs) and executed, with the guide pages, by myst-nb into a
cache under ``docs/_build/``.
"""

from __future__ import annotations

import filecmp
import importlib
import inspect
import shutil
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

from sphinx.util import logging as sphinx_logging  # noqa: E402

import lincomb  # noqa: E402

DOCS = Path(__file__).resolve().parent
ROOT = DOCS.parent

project = "lincomb"
author = "the lincomb developers"
copyright = "the lincomb developers"  # noqa: A001
release = lincomb.__version__
version = release

extensions = [
    "sphinx.ext.autodoc",
    "sphinx.ext.autosummary",
    "numpydoc",
    "myst_nb",
]

source_suffix = {".rst": "restructuredtext", ".md": "myst-nb", ".ipynb": "myst-nb"}
exclude_patterns = ["_build", "**.ipynb_checkpoints", "jupyter_execute"]
templates_path = ["_templates"]
root_doc = "index"

# -- offline: nothing is fetched at build or read time ---------------------------------------
# No intersphinx, no web fonts (furo uses the reader's system fonts and ships its own CSS and
# JavaScript), no MathJax (the pages write formulas in plain text; a page with math would pull
# MathJax from the network, so the finished build is scanned for it below).
html_theme = "furo"
html_title = f"lincomb {release}"
html_static_path: list[str] = []
html_show_sourcelink = False
html_copy_source = False

# -- API pages -------------------------------------------------------------------------------
autosummary_generate = True
autosummary_imported_members = True
autodoc_typehints = "none"  # the numpydoc Parameters and Returns sections carry the types
autodoc_member_order = "bysource"
autodoc_default_options = {
    "members": True,
    "undoc-members": False,
    "show-inheritance": True,
}
numpydoc_show_class_members = False
numpydoc_class_members_toctree = False
numpydoc_xref_param_type = False

# A broken cross-reference is a warning (so an error under -W).  Names from other libraries
# are not linked (no intersphinx: the build is offline), so they are exempt.
nitpicky = True
nitpick_ignore_regex = [
    (r"py:.*", r"(numpy|np|pandas|pd|scipy|matplotlib|dask|formulaic|threadpoolctl)(\..*)?"),
    (r"py:.*", r"(optional|array_like|array-like|ArrayLike|callable|iterable|mapping)"),
]

# -- notebooks and executed pages (myst-nb) --------------------------------------------------
nb_execution_mode = "cache"
nb_execution_cache_path = str(DOCS / "_build" / ".jupyter_cache")
nb_execution_timeout = 180
nb_execution_raise_on_error = True
nb_execution_show_tb = True
nb_merge_streams = True
myst_enable_extensions = ["colon_fence", "deflist"]
myst_heading_anchors = 3

#: Public namespaces whose ``__all__`` the API reference is written from.
API_MODULES = ("lincomb", "lincomb.errors", "lincomb.datasets", "lincomb.plot")
API_DIR = DOCS / "api"
NOTEBOOK_DIR = DOCS / "notebooks"

logger = sphinx_logging.getLogger("lincomb-docs")


def _write_if_changed(path: Path, text: str) -> None:
    """Write only when the content differs, so Sphinx does not rebuild unchanged pages."""
    if not path.exists() or path.read_text(encoding="utf-8") != text:
        path.write_text(text, encoding="utf-8")


def _home(modname: str, name: str) -> str | None:
    """The public namespace that documents ``modname.name`` if it is another one, else None.

    A name that a public module re-exports from another public module (``lincomb.datasets``
    re-exports an error class) is documented once, where it is defined.
    """
    obj = getattr(importlib.import_module(modname), name)
    home = getattr(obj, "__module__", "") or ""
    if home != modname and home in API_MODULES and hasattr(importlib.import_module(home), name):
        return home
    return None


def _kind(obj: object) -> str:
    if inspect.ismodule(obj):
        return "modules"
    if inspect.isclass(obj):
        if issubclass(obj, Warning):
            return "warnings"
        if issubclass(obj, BaseException):
            return "errors"
        return "classes"
    if callable(obj):
        return "functions"
    return "constants"


_HEADINGS = {
    "functions": "Functions",
    "classes": "Classes",
    "errors": "Errors",
    "warnings": "Warnings",
    "constants": "Constants",
    "modules": "Modules",
}


def _api_page(modname: str) -> str:
    mod = importlib.import_module(modname)
    title = f"``{modname}``"
    lines = [
        ".. This page is written by docs/conf.py from the module's __all__; do not edit.",
        "",
        title,
        "=" * len(title),
        "",
        f".. automodule:: {modname}",
        "   :no-members:",
        "",
        f".. currentmodule:: {modname}",
        "",
    ]
    groups: dict[str, list[str]] = {}
    elsewhere: list[tuple[str, str]] = []
    for name in mod.__all__:
        obj = getattr(mod, name)
        home = _home(modname, name)
        if home is not None:
            elsewhere.append((name, home))
        elif inspect.ismodule(obj):
            groups.setdefault("modules", []).append(name)
        else:
            groups.setdefault(_kind(obj), []).append(name)
    for kind in _HEADINGS:
        names = groups.get(kind)
        if not names:
            continue
        lines += [_HEADINGS[kind], "-" * len(_HEADINGS[kind]), ""]
        if kind == "modules":
            lines += [
                "Submodules with a reference page of their own:",
                "",
                *[f"* :doc:`{modname}.{n} <{modname}.{n}>`" for n in names],
                "",
            ]
            continue
        lines += [".. autosummary::", "   :toctree: generated", "   :nosignatures:", ""]
        lines += [f"   {n}" for n in names]
        lines.append("")
    if elsewhere:
        lines += ["Also available here", "-------------------", ""]
        for name, home in elsewhere:
            lines.append(f"* ``{modname}.{name}``: see :obj:`{home}.{name}`")
        lines.append("")
    return "\n".join(lines)


def write_api_pages(app: object, config: object) -> None:
    API_DIR.mkdir(exist_ok=True)
    for modname in API_MODULES:
        _write_if_changed(API_DIR / f"{modname}.rst", _api_page(modname))


def copy_notebooks(app: object, config: object) -> None:
    """Copy the worked notebooks in; their saved files stay output-free in ``notebooks/``."""
    NOTEBOOK_DIR.mkdir(exist_ok=True)
    for src in sorted((ROOT / "notebooks").glob("*.ipynb")):
        dst = NOTEBOOK_DIR / src.name
        if not dst.exists() or not filecmp.cmp(src, dst, shallow=False):
            shutil.copyfile(src, dst)


def check_every_public_name_documented(app, exception) -> None:  # noqa: ANN001
    """Every name in each public ``__all__`` is a documented Python object of the build."""
    if exception is not None or app.builder.name != "html":
        return
    objects = app.env.get_domain("py").objects
    missing = []
    for modname in API_MODULES:
        mod = importlib.import_module(modname)
        for name in mod.__all__:
            home = _home(modname, name) or modname
            full = f"{home}.{name}"
            if inspect.ismodule(getattr(mod, name)):
                full = f"{modname}.{name}"
            if full not in objects:
                missing.append(full)
    if missing:
        logger.warning("public names without an API page: %s", ", ".join(missing))
    # offline reading: no page may load a script, style or font from the network
    out = Path(app.outdir)
    remote = []
    for page in out.rglob("*.html"):
        text = page.read_text(encoding="utf-8")
        for marker in (
            'src="http',
            "src='http",
            'href="http://fonts',
            'href="https://fonts',
            "mathjax",
            "cdn.jsdelivr",
            "unpkg.com",
        ):
            if marker in text:
                remote.append(f"{page.relative_to(out)} ({marker})")
    if remote:
        logger.warning("pages that load assets from the network: %s", ", ".join(remote))


def _lincomb_object(target: str) -> tuple[str, str] | None:
    """Find the object a docstring's reference to lincomb means.

    Docstrings written inside the package refer to siblings by short or module-relative names
    (``covariance_pass``, ``lincomb.multiplicity.adjust_pvalues``) and to internal constants
    and modules (``FEW_CLUSTERS``, ``lincomb._core``).  Returns ``("public", name)`` when the
    target is a documented public name (matched by its last dotted parts), ``("private", name)``
    when it names a real object of a private module, and None when nothing by that name exists
    (then Sphinx's warning stands: the reference is broken).
    """
    parts = [p for p in target.lstrip("~.").split(".") if p]
    if not parts:
        return None
    public = _PUBLIC_NAMES
    for k in range(len(parts), 0, -1):
        tail = ".".join(parts[-k:])
        hits = [name for name in public if name == tail or name.endswith("." + tail)]
        if len(hits) == 1:
            return ("public", hits[0])
    if parts[0] == "lincomb":  # a full dotted path: import the longest module prefix
        for k in range(len(parts), 1, -1):
            modname = ".".join(parts[:k])
            if modname not in _PRIVATE_MODULES and modname != "lincomb":
                continue
            obj: object = importlib.import_module(modname)
            for attr in parts[k:]:
                fields = getattr(obj, "__dataclass_fields__", {})
                obj = getattr(obj, attr, None) if attr not in fields else fields[attr]
            if obj is not None and k < len(parts):
                return ("private", ".".join(parts))
    for modname in _PRIVATE_MODULES:
        short = modname.split(".")[-1].lstrip("_")
        if modname == ".".join(parts) or (len(parts) <= 3 and short == parts[-1].lstrip("_")):
            return ("private", modname)
    for modname in _PRIVATE_MODULES:
        obj = getattr(importlib.import_module(modname), parts[0 if len(parts) == 1 else -2], None)
        if obj is None or (len(parts) == 1 and inspect.ismodule(obj)):
            continue
        if len(parts) == 1:
            return ("private", f"{modname}.{parts[0]}")
        fields = getattr(obj, "__dataclass_fields__", {})
        if hasattr(obj, parts[-1]) or parts[-1] in fields:
            return ("private", f"{modname}.{parts[-2]}.{parts[-1]}")
    return None


def _private_modules() -> list[str]:
    import pkgutil

    return [
        info.name
        for info in pkgutil.walk_packages(lincomb.__path__, "lincomb.")
        if any(part.startswith("_") for part in info.name.split(".")[1:])
    ]


_PRIVATE_MODULES = _private_modules()
_PUBLIC_NAMES: list[str] = []


def collect_public_names(app, env) -> None:  # noqa: ANN001
    """The documented lincomb objects (known once every page has been read)."""
    _PUBLIC_NAMES[:] = [
        name
        for name, entry in env.get_domain("py").objects.items()
        if name.startswith("lincomb.")
        and not entry.aliased  # the private home of a re-exported class
        and not any(part.startswith("_") for part in name.split("."))
    ]


def resolve_lincomb_reference(app, env, node, contnode):  # noqa: ANN001, ANN201
    """Link a docstring's short or internal reference to its public page, or show it as code.

    A reference to a lincomb object with a public page links there; one to an internal object
    (a private module or constant) is shown as code without a link; any other unresolved
    reference keeps Sphinx's warning.
    """
    if node.get("refdomain") != "py":
        return None
    found = _lincomb_object(node["reftarget"])
    if found is None:
        return None
    kind, name = found
    if kind == "private":
        return contnode
    domain = env.get_domain("py")
    for role in ("obj", "meth", "attr", "func", "class", "mod", "data", "exc"):
        ref = domain.resolve_xref(env, node["refdoc"], app.builder, role, name, node, contnode)
        if ref is not None:
            return ref
    return None


def drop_private_bases(app, name, obj, options, bases) -> None:  # noqa: ANN001
    """The "Bases:" line names only public classes (a private base has no page)."""
    bases[:] = [b for b in bases if not b.__name__.startswith("_")]


def setup(app):  # noqa: ANN001, ANN201
    # before Sphinx lists the source files and autosummary reads them for names to generate
    app.connect("config-inited", write_api_pages)
    app.connect("config-inited", copy_notebooks)
    app.connect("env-updated", collect_public_names)
    app.connect("missing-reference", resolve_lincomb_reference)
    app.connect("autodoc-process-bases", drop_private_bases)
    app.connect("build-finished", check_every_public_name_documented)
    return {"parallel_read_safe": True}
