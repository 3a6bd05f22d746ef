package report

import (
	"bytes"
	"image/color"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// The house style: warm paper, dark ink, a muted palette. The same colours
// appear in the page's CSS.
var (
	paper   = color.RGBA{0xfb, 0xf8, 0xf1, 0xff}
	ink     = color.RGBA{0x2b, 0x2a, 0x28, 0xff}
	faint   = color.RGBA{0xe4, 0xdc, 0xcb, 0xff}
	stone   = color.RGBA{0x8a, 0x84, 0x78, 0xff}
	teal    = color.RGBA{0x2a, 0x8c, 0x82, 0xff}
	brick   = color.RGBA{0xc0, 0x50, 0x3a, 0xff}
	ochre   = color.RGBA{0xdf, 0x9b, 0x2f, 0xff}
	palette = []color.RGBA{
		teal, brick, ochre,
		{0x5b, 0x4e, 0x8a, 0xff}, // plum
		{0x5e, 0x8f, 0x3e, 0xff}, // moss
		{0x2f, 0x4f, 0x7a, 0xff}, // navy
		{0xb0, 0x5c, 0x8a, 0xff}, // heather
		{0x8c, 0x6a, 0x2f, 0xff}, // bronze
	}
)

// dpi of every PNG: 96, so a length of 1 inch is 96 pixels.
const dpi = 96

func newPlot(title, xLabel, yLabel string) *plot.Plot {
	p := plot.New()
	p.BackgroundColor = paper
	p.Title.Text = title
	p.Title.TextStyle.Color = ink
	p.Title.TextStyle.Font.Size = vg.Points(13)
	p.Title.Padding = vg.Points(8)
	for _, ax := range []*plot.Axis{&p.X, &p.Y} {
		ax.Color = stone
		ax.Label.TextStyle.Color = ink
		ax.Label.TextStyle.Font.Size = vg.Points(11)
		ax.Tick.Color = stone
		ax.Tick.Label.Color = ink
		ax.Tick.Label.Font.Size = vg.Points(9)
		ax.Padding = vg.Points(4)
	}
	p.X.Label.Text, p.Y.Label.Text = xLabel, yLabel
	p.Legend.TextStyle.Color = ink
	p.Legend.TextStyle.Font.Size = vg.Points(9)
	p.Legend.Top = true
	p.Legend.ThumbnailWidth = vg.Points(18)
	g := plotter.NewGrid()
	g.Vertical.Color, g.Horizontal.Color = faint, faint
	g.Vertical.Width, g.Horizontal.Width = vg.Points(0.6), vg.Points(0.6)
	p.Add(g)
	return p
}

func lineStyle(c color.Color, width float64, dashed bool) draw.LineStyle {
	ls := draw.LineStyle{Color: c, Width: vg.Points(width)}
	if dashed {
		ls.Dashes = []vg.Length{vg.Points(5), vg.Points(3)}
	}
	return ls
}

// renderPNG draws rows of plots (one column) into a w×h inch PNG.
func renderPNG(rows []*plot.Plot, w, h vg.Length) ([]byte, error) {
	c := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(dpi), vgimg.UseBackgroundColor(paper))
	dc := draw.New(c)
	if len(rows) == 1 {
		rows[0].Draw(dc)
	} else {
		grid := make([][]*plot.Plot, len(rows))
		for i, p := range rows {
			grid[i] = []*plot.Plot{p}
		}
		tiles := draw.Tiles{Rows: len(rows), Cols: 1, PadY: vg.Points(10), PadTop: vg.Points(4), PadBottom: vg.Points(4),
			PadLeft: vg.Points(4), PadRight: vg.Points(8)}
		canvases := plot.Align(grid, tiles, dc)
		for i, p := range rows {
			p.Draw(canvases[i][0])
		}
	}
	var buf bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: c}).WriteTo(&buf); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}
