"""The display seam: results reach their text, HTML and figures without knowing them.

A result record (``Comparison``, ``ScanResult``, ``Evaluation``, ``MXResult``, ``ScaleAdvice``)
mixes in ``Displayable`` (or ``Plottable``) and so answers ``to_text()``, ``to_html()``,
``str()``, ``_repr_mimebundle_`` (Jupyter) and, for ``Plottable``, ``plot()``. It never imports a
renderer: the render and plots layers register one function per (view, result type) with
``register`` when they are imported, and the first request for a view asks the loader that the
package root installed (``install_loader``) to import them. So the numeric core stays free of
presentation code, and every import in the package still points down the layer table.
"""

from __future__ import annotations

from typing import Any, Callable, Literal

from .errors import BitprismError

__all__ = ["Displayable", "Plottable", "View", "install_loader", "register", "render"]

View = Literal["text", "html", "plot"]
_VIEWS: dict[tuple[str, type], Callable[..., Any]] = {}
_loader: Callable[[str], None] | None = None


def register(view: View, result_type: type, function: Callable[..., Any]) -> None:
    """Make ``function(result, **options)`` the ``view`` of ``result_type`` (and subclasses)."""
    _VIEWS[(view, result_type)] = function


def install_loader(loader: Callable[[str], None]) -> None:
    """``loader(view)`` imports the layer that registers ``view`` functions (the package root
    installs it, since only the root may import every layer)."""
    global _loader
    _loader = loader


def _find(view: str, result_type: type) -> Callable[..., Any] | None:
    for cls in result_type.__mro__:
        function = _VIEWS.get((view, cls))
        if function is not None:
            return function
    return None


def render(view: View, result: Any, **options: Any) -> Any:
    """The ``view`` of ``result``: a str for "text" and "html", a matplotlib Figure for "plot"."""
    function = _find(view, type(result))
    if function is None and _loader is not None:
        _loader(view)
        function = _find(view, type(result))
    if function is None:
        raise BitprismError(f"{type(result).__name__} has no {view} view")
    return function(result, **options)


class Displayable:
    """Text and HTML of a result, through the views registered for its type."""

    __slots__ = ()

    def to_text(self, **options: Any) -> str:
        """The result as plain text (what a terminal shows)."""
        return str(render("text", self, **options))

    def to_html(self, **options: Any) -> str:
        """The result as a self-contained HTML fragment (inline styles, no scripts)."""
        return str(render("html", self, **options))

    def __str__(self) -> str:
        return self.to_text()

    def _repr_html_(self) -> str:
        return self.to_html()

    def _repr_mimebundle_(self, include: Any = None, exclude: Any = None) -> dict[str, str]:
        return {"text/plain": self.to_text(), "text/html": self.to_html()}


class Plottable(Displayable):
    """A result with a figure as well."""

    __slots__ = ()

    def plot(self, **options: Any) -> Any:
        """The result's figure (a matplotlib Figure; matplotlib is imported only now)."""
        return render("plot", self, **options)
