"""The chain: the design's stages in signal order, drawn as blocks on a
strip, with their ports, the signal path between them and the extra links
(for example an envelope output to a control input) drawn as curves.

Click a block to select it; click its lamp to bypass it; drag from one port
to another to link them; right-click a link to remove it. The toolbar above
adds from the stage library, removes, moves, duplicates and imports.
"""
from __future__ import annotations

from PyQt6.QtCore import QPointF, QRectF, Qt, pyqtSignal
from PyQt6.QtGui import QBrush, QColor, QFont, QPainter, QPainterPath, QPen
from PyQt6.QtWidgets import (QGraphicsEllipseItem, QGraphicsItem, QGraphicsPathItem,
                             QGraphicsRectItem, QGraphicsScene, QGraphicsSimpleTextItem,
                             QGraphicsView, QMenu)

from solderless.gui import theme
from solderless.gui.model import Workbench

BW, BH, GAP = 150.0, 84.0, 46.0
PORT_R = 5.5
X0, Y0 = 20.0, 24.0
SIDE_Y = Y0 + BH + 40.0
"""Top of the row of side-branch stages (below the signal line)."""


class PortItem(QGraphicsEllipseItem):
    def __init__(self, stage: str, port: str, parent):
        super().__init__(-PORT_R, -PORT_R, 2 * PORT_R, 2 * PORT_R, parent)
        self.stage, self.port = stage, port
        self.setBrush(QBrush(QColor(theme.INSET)))
        self.setPen(QPen(QColor(theme.READ), 1.6))
        self.setToolTip(f"{stage}.{port} — drag to another port to link")
        self.setCursor(Qt.CursorShape.CrossCursor)
        self.setZValue(3)


class StageBlock(QGraphicsRectItem):
    def __init__(self, st, index: int):
        super().__init__(0, 0, BW, BH)
        self.name = st.name
        self.setPen(QPen(QColor(theme.RULE), 1.4))
        self.setBrush(QBrush(QColor("#2b3037")))
        self.setFlag(QGraphicsItem.GraphicsItemFlag.ItemIsSelectable, True)
        self.setCursor(Qt.CursorShape.PointingHandCursor)
        num = QGraphicsSimpleTextItem(f"{index + 1:02d}", self)
        num.setBrush(QColor(theme.DIM))
        num.setFont(QFont(theme.MONO, 8))
        num.setPos(8, 6)
        title = QGraphicsSimpleTextItem(st.name, self)
        f = QFont()
        f.setBold(True)
        f.setPointSize(10)
        title.setFont(f)
        title.setBrush(QColor(theme.TEXT))
        title.setPos(30, 4)
        kind = QGraphicsSimpleTextItem("", self)
        kind.setBrush(QColor(theme.DIM))
        kind.setFont(QFont("", 8))
        # elided to the block's width (with a tooltip), never cut mid-word
        from PyQt6.QtGui import QFontMetricsF
        full = st.kind or "stage"
        kind.setText(QFontMetricsF(kind.font()).elidedText(full, Qt.TextElideMode.ElideRight,
                                                           BW - 16))
        if kind.text() != full:
            kind.setToolTip(full)
        kind.setPos(8, 28)
        nparts = QGraphicsSimpleTextItem(f"{len(st.parts)} parts", self)
        nparts.setBrush(QColor(theme.DIM))
        nparts.setFont(QFont("", 8))
        nparts.setPos(8, 44)
        self.lamp = QGraphicsEllipseItem(BW - 22, 8, 12, 12, self)
        self.lamp.setToolTip("lit: in circuit; dark: bypassed (click to toggle)")
        self.lamp.setCursor(Qt.CursorShape.PointingHandCursor)
        self.set_bypass(st.bypass)
        self.ports: dict[str, PortItem] = {}
        extra = [p for p in st.ports if p not in ("in", "out")]
        if "in" in st.ports:
            self._port(st, "in", 0, BH / 2, left=True)
        if "out" in st.ports:
            self._port(st, "out", BW, BH / 2)
        for i, p in enumerate(extra):
            x = BW * (i + 1) / (len(extra) + 1)
            self._port(st, p, x, BH, below=True)

    def _port(self, st, name, x, y, left=False, below=False):
        it = PortItem(st.name, name, self)
        it.setPos(x, y)
        lab = QGraphicsSimpleTextItem(name, self)
        lab.setBrush(QColor(theme.READ))
        lab.setFont(QFont(theme.MONO, 7))
        w = lab.boundingRect().width()
        if below:
            lab.setPos(x - w / 2, y + 6)
        elif left:
            lab.setPos(x - w - 3, y - 20)
        else:
            lab.setPos(x + 3, y - 20)
        self.ports[name] = it

    def set_bypass(self, on: bool) -> None:
        self.bypassed = on
        self.lamp.setBrush(QBrush(QColor("#3a2a10" if on else theme.SET)))
        self.lamp.setPen(QPen(QColor(theme.SET), 1))
        self.setOpacity(0.55 if on else 1.0)

    def set_selected_look(self, on: bool) -> None:
        self.setPen(QPen(QColor(theme.SET if on else theme.RULE), 2.4 if on else 1.4))


class ChainView(QGraphicsView):
    """The stage strip. Signals: ``stage_selected(name)``."""
    stage_selected = pyqtSignal(str)

    def __init__(self, wb: Workbench, message=print, parent=None):
        super().__init__(parent)
        self.wb = wb
        self.message = message
        self.scene_ = QGraphicsScene(self)
        self.setScene(self.scene_)
        self.setRenderHint(QPainter.RenderHint.Antialiasing)
        self.setBackgroundBrush(QBrush(QColor(theme.INSET)))
        self.setAlignment(Qt.AlignmentFlag.AlignLeft | Qt.AlignmentFlag.AlignTop)
        self.setMinimumHeight(int(BH + 2 * Y0 + 70))
        self.side: set[str] = set()
        self.setFocusPolicy(Qt.FocusPolicy.StrongFocus)
        self.blocks: dict[str, StageBlock] = {}
        self.link_items: list[tuple[QGraphicsPathItem, int]] = []
        self.selected: str | None = None
        self._drag_from: PortItem | None = None
        self._rubber: QGraphicsPathItem | None = None
        wb.design_replaced.connect(self.rebuild)
        self.rebuild()

    # ------------------------------------------------------------ drawing
    def rebuild(self) -> None:
        self.scene_.clear()
        self.blocks = {}
        self.link_items = []
        self._rubber = None
        d = self.wb.design
        # stages on the signal line (with an out port) in one row; side
        # branches (no out port: a detector, a bias network) in a row below,
        # under the point of the line they hang from
        col = 0
        side_at: dict[int, int] = {}
        self.side: set[str] = set()
        for i, st in enumerate(d.stages):
            b = StageBlock(st, i)
            if "out" in st.ports:
                b.setPos(X0 + col * (BW + GAP), Y0)
                col += 1
            else:
                k = side_at.get(col, 0)
                side_at[col] = k + 1
                x = X0 + max(col - 0.5, 0.0) * (BW + GAP) + k * (BW + GAP / 2)
                b.setPos(x, SIDE_Y)
                b.setToolTip(f"{st.name}: a side branch (no out port), fed from the "
                             "signal line, not in series with it")
                self.side.add(st.name)
            self.scene_.addItem(b)
            self.blocks[st.name] = b
        # jacks
        self._jack("IN", X0 - 14, Y0 + BH / 2, left=True)
        self._jack("OUT", X0 + col * (BW + GAP) - GAP + 14, Y0 + BH / 2)
        # the signal path, and taps down to side branches with an input
        pen = QPen(QColor(theme.DIM), 2)
        tap = QPen(QColor(theme.DIM), 1.6, Qt.PenStyle.DotLine)
        prev = None
        for st in d.stages:
            b = self.blocks[st.name]
            if prev is not None and "in" in b.ports:
                a = prev.mapToScene(QPointF(BW, BH / 2))
                c = b.ports["in"].scenePos()
                self._arrow(a, c, pen if st.name not in self.side else tap)
            if "out" in st.ports:
                prev = b
        # links
        for k, ln in enumerate(d.links):
            try:
                pa = self.blocks[ln.a[0]].ports[ln.a[1]].scenePos()
                pb = self.blocks[ln.b[0]].ports[ln.b[1]].scenePos()
            except KeyError:
                continue
            path = QPainterPath(pa)
            drop = 52 + 12 * k
            path.cubicTo(QPointF(pa.x(), pa.y() + drop), QPointF(pb.x(), pb.y() + drop), pb)
            it = QGraphicsPathItem(path)
            p = QPen(QColor(theme.SET), 2.2, Qt.PenStyle.DashLine)
            it.setPen(p)
            it.setToolTip(f"link {ln.a[0]}.{ln.a[1]} — {ln.b[0]}.{ln.b[1]} "
                          "(right-click to remove)")
            it.setZValue(1)
            self.scene_.addItem(it)
            self.link_items.append((it, k))
        if self.selected not in self.blocks:
            self.selected = d.stages[0].name if d.stages else None
        self._show_selection()
        self.setSceneRect(self.scene_.itemsBoundingRect().adjusted(-10, -10, 20, 10))
        # tall enough for the row of side branches without scrolling
        self.setMinimumHeight(min(int(self.sceneRect().height()) + 6,
                                  int(SIDE_Y + BH + 36)))

    def _jack(self, text, x, y, left=False):
        it = QGraphicsSimpleTextItem(text)
        it.setBrush(QColor(theme.DIM))
        it.setFont(QFont(theme.MONO, 8))
        w = it.boundingRect().width()
        it.setPos(x - w - 2 if left else x + 2, y - 24)
        self.scene_.addItem(it)
        dot = self.scene_.addEllipse(x - 4, y - 4, 8, 8, QPen(QColor(theme.DIM), 1.5),
                                     QBrush(QColor(theme.CASE)))
        if left and self.blocks:
            first = next(iter(self.blocks.values()))
            if "in" in first.ports:
                self._arrow(QPointF(x + 4, y), first.ports["in"].scenePos(),
                            QPen(QColor(theme.DIM), 2))
        elif not left and self.blocks:
            last = None
            for st in self.wb.design.stages:
                if "out" in st.ports:
                    last = self.blocks[st.name]
            if last is not None:
                self._arrow(last.ports["out"].scenePos(), QPointF(x - 4, y),
                            QPen(QColor(theme.DIM), 2))
        return dot

    def _arrow(self, a: QPointF, b: QPointF, pen: QPen) -> None:
        path = QPainterPath(a)
        if abs(a.y() - b.y()) < 1:
            path.lineTo(b)
        else:
            mx = (a.x() + b.x()) / 2
            path.cubicTo(QPointF(mx, a.y()), QPointF(mx, b.y()), b)
        path.moveTo(b.x() - 7, b.y() - 4)
        path.lineTo(b.x() - 1, b.y())
        path.lineTo(b.x() - 7, b.y() + 4)
        it = self.scene_.addPath(path, pen)
        it.setZValue(0)

    def _show_selection(self) -> None:
        for name, b in self.blocks.items():
            b.set_selected_look(name == self.selected)

    def select(self, name: str | None) -> None:
        self.selected = name
        self._show_selection()
        if name:
            self.ensureVisible(self.blocks[name])
            self.stage_selected.emit(name)

    def select_offset(self, delta: int) -> None:
        names = [s.name for s in self.wb.design.stages]
        if not names:
            return
        i = names.index(self.selected) if self.selected in names else 0
        self.select(names[max(0, min(len(names) - 1, i + delta))])

    # ------------------------------------------------------------ mouse
    def _item_at(self, pos):
        for it in self.items(pos):
            if isinstance(it, PortItem):
                return it
        for it in self.items(pos):
            if it in [li for li, _ in self.link_items]:
                return it
            p = it
            while p is not None and not isinstance(p, StageBlock):
                if isinstance(p, QGraphicsEllipseItem) and isinstance(p.parentItem(),
                                                                      StageBlock) \
                        and p is p.parentItem().lamp:
                    return p
                p = p.parentItem()
            if isinstance(p, StageBlock):
                return p
        return None

    def mousePressEvent(self, e):
        it = self._item_at(e.position().toPoint())
        if e.button() == Qt.MouseButton.RightButton:
            for li, k in self.link_items:
                if it is li:
                    menu = QMenu(self)
                    act = menu.addAction("Remove this link")
                    if menu.exec(e.globalPosition().toPoint()) is act:
                        self._guard(self.wb.remove_link, k)
                    return
            return
        if isinstance(it, PortItem):
            self._drag_from = it
            self._rubber = QGraphicsPathItem()
            self._rubber.setPen(QPen(QColor(theme.SET), 1.5, Qt.PenStyle.DotLine))
            self.scene_.addItem(self._rubber)
            return
        if isinstance(it, QGraphicsEllipseItem) and isinstance(it.parentItem(), StageBlock):
            blk = it.parentItem()
            self._guard(self.wb.set_bypass, blk.name, not blk.bypassed)
            return
        if isinstance(it, StageBlock):
            self.select(it.name)
            return
        super().mousePressEvent(e)

    def mouseMoveEvent(self, e):
        if self._drag_from is not None and self._rubber is not None:
            a = self._drag_from.scenePos()
            b = self.mapToScene(e.position().toPoint())
            path = QPainterPath(a)
            path.lineTo(b)
            self._rubber.setPath(path)
            return
        super().mouseMoveEvent(e)

    def mouseReleaseEvent(self, e):
        if self._drag_from is not None:
            src = self._drag_from
            self._drag_from = None
            if self._rubber is not None:
                self.scene_.removeItem(self._rubber)
                self._rubber = None
            it = self._item_at(e.position().toPoint())
            if isinstance(it, PortItem) and it is not src:
                self._guard(self.wb.add_link, (src.stage, src.port), (it.stage, it.port))
            return
        super().mouseReleaseEvent(e)

    def _guard(self, fn, *a):
        from solderless.engine.errors import SolderlessError
        try:
            return fn(*a)
        except SolderlessError as exc:
            self.message(str(exc))
            return None

    def keyPressEvent(self, e):
        k = e.key()
        if k == Qt.Key.Key_Left and not e.modifiers():
            self.select_offset(-1)
        elif k == Qt.Key.Key_Right and not e.modifiers():
            self.select_offset(+1)
        else:
            super().keyPressEvent(e)
