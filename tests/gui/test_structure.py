"""How the window is put together (flakebook.gui): mixins that never collide, registries that
hold what they list. Common practice, no source: these check the project's own layout."""

from __future__ import annotations

from pathlib import Path

import pytest

import flakebook


def _collisions(cls) -> list[str]:
    seen: dict[str, type] = {}
    out = []
    for base in cls.__mro__[1:]:
        if not base.__module__.startswith("flakebook."):
            continue
        for name in vars(base):
            if name.startswith("__"):
                continue
            if name in seen:
                out.append(f"{name}: {seen[name].__module__} and {base.__module__}")
            seen.setdefault(name, base)
    return out


def test_no_two_parts_of_the_window_or_session_define_one_name():
    from flakebook.gui.mainwindow import MainWindow
    from flakebook.gui.session import Session

    assert _collisions(MainWindow) == []
    assert _collisions(Session) == []


def test_collision_check_sees_a_shadowed_method():
    class A:
        def f(self): ...

    class B:
        def f(self): ...

    A.__module__ = B.__module__ = "flakebook.x"

    class C(A, B): ...

    assert _collisions(C) == ["f: flakebook.x and flakebook.x"]


def test_every_registered_tool_and_view_is_complete():
    from flakebook.gui import tools, views
    from flakebook.gui.canvas import TOOLS
    from flakebook.gui.tools.base import CanvasTool

    assert TOOLS == tuple(tools.CANVAS_TOOLS)
    for name, tool in tools.CANVAS_TOOLS.items():
        assert isinstance(tool, CanvasTool) and tool.name == name and tool.key and tool.hint
        assert Path(tools.__file__).with_name(f"{name}.py").exists()
    for name in views.NAMES:
        mod = views.module(name)
        assert isinstance(mod.VIEW, views.View) and callable(mod.connect)
    with pytest.raises(KeyError):
        views.module("nothing")


def test_show_accepts_every_registered_view():
    from flakebook.gui.app import parse_show
    from flakebook.gui.views import NAMES

    for name in NAMES:
        assert parse_show(name) == (name, None)


def test_no_gui_module_is_over_800_lines():
    """DESIGN.md: a module past about 800 lines is split by concern."""
    root = Path(flakebook.__file__).parent / "gui"
    long = {
        str(p.relative_to(root)): n
        for p in root.rglob("*.py")
        if (n := len(p.read_text(encoding="utf-8").splitlines())) > 800
    }
    assert long == {}
