"""The singular-value view: the singular values (dB) of every kept vector pair against log
frequency, one colour per pair, one dash per singular value."""
from __future__ import annotations

from loopwright.engine.views_data import singular_value_views
from loopwright.gui.docks.panel import PlotPanel, new_layout_widget, pair_colour, pen_for, themed_plot

__all__ = ["SingularValuePanel"]


class SingularValuePanel(PlotPanel):
    key = "singular_values"
    title = "singular-value view"

    def __init__(self, parent=None):
        super().__init__(parent)
        self.canvas = new_layout_widget()
        self.plot = themed_plot(self.canvas, 0, left="singular values (dB)", bottom="frequency (rad/s)", log_x=True)
        self.legend = self.plot.addLegend(offset=(-10, 10), labelTextColor="#1f2933", brush=(255, 255, 255, 210))
        self._layout.addWidget(self.canvas, 1)
        self.curves: dict[tuple, object] = {}
        self.data: dict = {}

    def job(self, diagram, pairs, shared=None):
        if not pairs:
            self.set_message("No pair yet. The singular values of a pair with a vector input or output show its gain in every direction.")
            return None
        return singular_value_views, (diagram, list(pairs)), {"drawing": True, "shared": shared}

    def show_value(self, value) -> None:
        value = value or []
        wanted, errors = set(), []
        self.data = {}
        for k, (pair, v) in enumerate(zip(self.pairs, value)):
            if isinstance(v, str):
                errors.append(f"{pair[1]}: {v}")
                continue
            w, sv = v
            self.data[pair] = v
            for i in range(sv.shape[1]):
                key = (pair, i)
                wanted.add(key)
                if key not in self.curves:
                    self.curves[key] = self.plot.plot(name=f"σ{i + 1}  {pair[1]} ← {pair[0]}")
                self.curves[key].setPen(pen_for(pair_colour(k), i))
                self.curves[key].setData(w, sv[:, i])
        for key in [k for k in self.curves if k not in wanted]:
            item = self.curves.pop(key)
            self.plot.removeItem(item)
            self.legend.removeItem(item)
        if errors:
            self.show_error("\n".join(errors))
        elif self.pairs:
            single = all(v[1].shape[1] == 1 for v in self.data.values())
            self.set_message("Every kept pair has a single input or a single output: its one singular value is the "
                             "length of its response vector (the magnitude for a scalar pair)." if single else "")
        self.plot.enableAutoRange()

    def plot_scene_item(self):
        return self.canvas.ci

    def table(self):
        rows = []
        for pair, (w, sv) in self.data.items():
            for k in range(w.size):
                rows.append([f"{pair[1]} <- {pair[0]}", float(w[k])] + [float(x) for x in sv[k]])
        width = max((v[1].shape[1] for v in self.data.values()), default=1)
        return ["pair", "w_rad_s"] + [f"sigma{i + 1}_db" for i in range(width)], rows
