"""The desktop program (PySide6, pyqtgraph). The only package besides render/ that imports Qt.

How the window reaches the per-concern code: mixins, everywhere. ``MainWindow`` and ``Session``
are each one class put together from small classes, one per concern (``window/`` and
``session/``) and one per tool (``WindowCommands`` and ``SessionEdits`` of each module in
``tools/``, collected by the tool registry). Mixins rather than thin delegation because the
public names (``window.add_hole``, ``session.add_hole``, ...) stay what they were with no
forwarding method per name (more than fifty of them, each a place to forget one), the concerns
share the window's state (``self.session``, ``self.canvas``, ``self.edit``) as they did, and
a test can still replace one method on one object. The price: a mixin uses attributes that
another part defines; each mixin's docstring says what it is for, and no two parts define the
same name (checked when the suite runs the window). See docs/architecture-gui.md.
"""

from flakebook import _qtguard

_qtguard.apply()
