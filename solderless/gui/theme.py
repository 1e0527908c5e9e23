"""Look of the workbench: a dark bench-instrument panel with lit readouts.

Colours and the style sheet live here so widgets stay thin. The palette is our
own: a graphite case, warm amber for values the user sets, a cool cyan for
what the circuit reports, and a red only for trouble.
"""
from __future__ import annotations

CASE = "#1d2024"        # window background
PANEL = "#262a30"       # group panels
INSET = "#14161a"       # displays, plots, tables
RULE = "#3a4048"        # frames and separators
TEXT = "#d8dde3"
DIM = "#8a929c"
SET = "#f2b33d"         # values the user sets (amber)
READ = "#57d3e0"        # values the circuit reports (cyan)
GOOD = "#7fd46b"
WARN = "#f0a03c"
BAD = "#f0524f"
TRACE_COLOURS = ["#57d3e0", "#f2b33d", "#b58cf0", "#7fd46b", "#f07fb5", "#e0e070"]

MONO = "DejaVu Sans Mono"

STYLE = f"""
QWidget {{ background: {CASE}; color: {TEXT}; font-size: 10pt; }}
QLabel {{ background: transparent; }}
QGroupBox {{ background: {PANEL}; border: 1px solid {RULE}; border-radius: 6px;
            margin-top: 14px; padding: 6px 4px 4px 4px; }}
QGroupBox::title {{ subcontrol-origin: margin; left: 10px; padding: 0 4px;
                   color: {DIM}; font-weight: bold; letter-spacing: 1px; }}
QLineEdit, QComboBox, QSpinBox, QDoubleSpinBox, QPlainTextEdit, QTextEdit {{
    background: {INSET}; border: 1px solid {RULE}; border-radius: 3px;
    padding: 2px 4px; selection-background-color: #44607a; }}
QLineEdit[valid="false"] {{ border: 1px solid {BAD}; color: {BAD}; }}
QLineEdit[role="value"] {{ color: {SET}; font-family: "{MONO}"; font-weight: bold; }}
QLabel[role="read"] {{ color: {READ}; font-family: "{MONO}"; }}
QLabel[role="dim"] {{ color: {DIM}; }}
QLabel[role="warn"] {{ color: {WARN}; }}
QLabel[role="big"] {{ color: {READ}; font-family: "{MONO}"; font-size: 13pt; }}
QPushButton, QToolButton {{ background: #30353c; border: 1px solid {RULE};
    border-radius: 4px; padding: 3px 8px; }}
QPushButton:hover, QToolButton:hover {{ background: #3a414a; }}
QPushButton:checked, QToolButton:checked {{ background: #5a4520; border-color: {SET};
    color: {SET}; }}
QPushButton:disabled, QToolButton:disabled {{ color: #5b626b; }}
QTableWidget, QTreeWidget, QListWidget {{ background: {INSET}; alternate-background-color: #1a1d21;
    gridline-color: {RULE}; border: 1px solid {RULE}; }}
QHeaderView::section {{ background: {PANEL}; color: {DIM}; border: 0px;
    border-right: 1px solid {RULE}; padding: 3px; }}
QTabWidget::pane {{ border: 1px solid {RULE}; }}
QTabBar::tab {{ background: {PANEL}; color: {DIM}; padding: 4px 12px; border: 1px solid {RULE};
    border-bottom: 0px; border-top-left-radius: 4px; border-top-right-radius: 4px; }}
QTabBar::tab:selected {{ color: {TEXT}; background: #313740; }}
QScrollArea {{ border: 0px; }}
QStatusBar {{ color: {DIM}; }}
QMenuBar::item:selected, QMenu::item:selected {{ background: #3a414a; }}
QSplitter::handle {{ background: {RULE}; }}
QDial {{ background: {PANEL}; }}
"""


def apply(app) -> None:
    """Give the application the workbench style and pyqtgraph its colours."""
    import pyqtgraph as pg
    app.setStyleSheet(STYLE)
    # no antialiasing: painting runs Python on the GUI thread, which shares the
    # GIL with the audio thread; crisp thin lines cost a fraction of smooth ones
    pg.setConfigOptions(background=INSET, foreground=DIM, antialias=False)
