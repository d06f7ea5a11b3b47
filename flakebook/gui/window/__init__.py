"""The main window's behaviour, one mixin per concern (see flakebook.gui and docs/architecture-gui.md)."""
