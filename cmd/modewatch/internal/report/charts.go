package report

import (
	"bytes"
	"fmt"
	"image/color"
	"math"
	"sort"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

	"modewatch/cmd/modewatch/internal/pipeline"
)

// The report's palette: muted ink and paper tones, chosen for this report.
var (
	colInk      = color.NRGBA{0x2b, 0x33, 0x3d, 0xff} // text and axes
	colBand     = color.NRGBA{0x5a, 0x78, 0x96, 0x70} // min–max envelope of a statistic
	colStat     = color.NRGBA{0x33, 0x4e, 0x68, 0xff} // bucket maximum
	colLimit    = color.NRGBA{0xa3, 0x3b, 0x20, 0xff} // control limit
	colAlert    = color.NRGBA{0xe0, 0xa2, 0x3a, 0x50} // alert spans
	colEpisode  = color.NRGBA{0x5b, 0x8c, 0x6e, 0x38} // labelled episodes
	colEpLabel  = color.NRGBA{0x2f, 0x5e, 0x43, 0xff}
	colPositive = color.NRGBA{0x4a, 0x6f, 0x8f, 0xff} // positive loadings
	colNegative = color.NRGBA{0xc0, 0x7a, 0x3c, 0xff} // negative loadings
	heatLow     = color.NRGBA{0xf6, 0xf3, 0xec, 0xff}
	heatMid     = color.NRGBA{0xe3, 0xb5, 0x6b, 0xff}
	heatHigh    = color.NRGBA{0x7a, 0x2e, 0x1c, 0xff}
)

// span is a shaded interval of event time (Unix seconds) with a label.
type span struct {
	from, to float64
	label    string
}

// spans draws shaded intervals over the whole height of a plot, under the
// data; it takes no part in the axis ranges.
type spans struct {
	items []span
	fill  color.Color
	text  color.Color
}

// Plot implements plot.Plotter.
func (s *spans) Plot(c draw.Canvas, plt *plot.Plot) {
	trX, _ := plt.Transforms(&c)
	sty := draw.TextStyle{Color: s.text, Font: font.From(plot.DefaultFont, vg.Points(7)), Handler: plt.Title.TextStyle.Handler}
	for k, it := range s.items {
		x0, x1 := trX(it.from), trX(it.to)
		if x1 < c.Min.X || x0 > c.Max.X {
			continue
		}
		x0, x1 = max(x0, c.Min.X), min(x1, c.Max.X)
		if x1-x0 < vg.Points(0.8) {
			x1 = x0 + vg.Points(0.8)
		}
		c.FillPolygon(s.fill, []vg.Point{{X: x0, Y: c.Min.Y}, {X: x1, Y: c.Min.Y}, {X: x1, Y: c.Max.Y}, {X: x0, Y: c.Max.Y}})
		if it.label != "" && s.text != nil {
			// Alternate two label rows so that neighbouring or overlapping
			// episodes stay readable.
			y := c.Max.Y - vg.Points(8) - vg.Length(k%2)*vg.Points(9)
			c.FillText(sty, vg.Point{X: x0 + vg.Points(1.5), Y: y}, it.label)
		}
	}
}

// svgBytes renders p as SVG of the given size.
func svgBytes(p *plot.Plot, w, h vg.Length) ([]byte, error) {
	cv := vgsvg.New(w, h)
	p.Draw(draw.New(cv))
	var b bytes.Buffer
	if _, err := cv.WriteTo(&b); err != nil {
		return nil, err
	}
	return b.Bytes(), nil
}

func newPlot(title, xlabel, ylabel string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Color = colInk
	p.X.Label.Text, p.Y.Label.Text = xlabel, ylabel
	for _, ax := range []*plot.Axis{&p.X, &p.Y} {
		ax.Color = colInk
		ax.Label.TextStyle.Color = colInk
		ax.Tick.Label.Color = colInk
		ax.Tick.Color = colInk
	}
	p.BackgroundColor = color.White
	return p
}

// statChart draws statistic st of series s over time: the min–max envelope
// of every bucket, the bucket maxima, the limit, alert spans and episodes.
// The y axis is logarithmic when the values span more than two decades.
func statChart(s *series, st int, alerts, episodes []span) ([]byte, error) {
	var lo, hi, upper []plotter.XY
	minPos, maxV := math.Inf(1), 0.0
	for _, b := range s.buckets {
		if b.n == 0 || math.IsInf(b.min[st], 0) {
			continue
		}
		for _, v := range []float64{b.min[st], b.max[st], b.limit[st]} {
			if v > 0 {
				minPos = math.Min(minPos, v)
				maxV = math.Max(maxV, v)
			}
		}
	}
	if math.IsInf(minPos, 1) {
		return nil, nil // nothing scored
	}
	logY := maxV/minPos > 100
	floor := 0.0
	if logY {
		// Log axes cannot show zero: a zero is drawn at the smallest
		// positive value (at least 10⁻⁶ of the largest).
		floor = math.Max(minPos, maxV*1e-6)
	}
	var limit plotter.XYs
	for _, b := range s.buckets {
		if b.n == 0 || math.IsInf(b.min[st], 0) {
			continue
		}
		x0, x1 := float64(b.from)/1e9, float64(b.to)/1e9
		xm := (x0 + x1) / 2
		lo = append(lo, plotter.XY{X: xm, Y: math.Max(b.min[st], floor)})
		hi = append(hi, plotter.XY{X: xm, Y: math.Max(b.max[st], floor)})
		upper = append(upper, plotter.XY{X: xm, Y: math.Max(b.max[st], floor)})
		if l := b.limit[st]; l > 0 && !math.IsInf(l, 0) {
			limit = append(limit, plotter.XY{X: xm, Y: l})
		}
	}
	ring := append(plotter.XYs(nil), hi...)
	for i := len(lo) - 1; i >= 0; i-- {
		ring = append(ring, lo[i])
	}
	title := fmt.Sprintf("%s: %s against its limit", s.name, statNames[st])
	if s.per > 1 {
		title += fmt.Sprintf(" (each point: min–max of %d frames)", s.per)
	}
	p := newPlot(title, "event time (UTC)", statNames[st])
	p.X.Tick.Marker = plot.TimeTicks{Format: "01-02\n15:04"}
	if logY {
		p.Y.Scale = plot.LogScale{}
		p.Y.Tick.Marker = plot.LogTicks{Prec: -1}
		p.Y.Label.Text += " (log scale)"
	}
	ep := &spans{items: episodes, fill: colEpisode, text: colEpLabel}
	al := &spans{items: alerts, fill: colAlert}
	p.Add(ep, al)
	band, err := plotter.NewPolygon(ring)
	if err != nil {
		return nil, err
	}
	band.Color = colBand
	band.LineStyle.Width = 0
	p.Add(band)
	mx, err := plotter.NewLine(plotter.XYs(upper))
	if err != nil {
		return nil, err
	}
	mx.Color = colStat
	mx.Width = vg.Points(0.6)
	p.Add(mx)
	if len(limit) > 0 {
		ln, err := plotter.NewLine(limit)
		if err != nil {
			return nil, err
		}
		ln.Color = colLimit
		ln.Width = vg.Points(1)
		ln.Dashes = []vg.Length{vg.Points(4), vg.Points(2)}
		p.Add(ln)
	}
	// The key is on the page, once for all charts.
	return svgBytes(p, 24*vg.Centimeter, 8*vg.Centimeter)
}

// loadingsChart draws one mode's loadings as horizontal bars named by
// channel (positive and negative in two colours).
func loadingsChart(unit string, m pipeline.ModeView) ([]byte, error) {
	n := len(m.Channels)
	if n == 0 {
		return nil, nil
	}
	// Largest magnitude at the top.
	order := make([]int, n)
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return math.Abs(m.Loadings[order[a]]) < math.Abs(m.Loadings[order[b]]) })
	pos, neg := make(plotter.Values, n), make(plotter.Values, n)
	names := make([]string, n)
	for k, i := range order {
		names[k] = shortName(unit, m.Channels[i])
		if v := m.Loadings[i]; v >= 0 {
			pos[k] = v
		} else {
			neg[k] = v
		}
	}
	p := newPlot(fmt.Sprintf("%s mode %d: %.1f %% of the variance, %d channel(s)", unit, m.ID, 100*m.VarianceShare, n), "loading", "")
	w := vg.Points(9)
	for _, set := range []struct {
		v   plotter.Values
		col color.Color
	}{{pos, colPositive}, {neg, colNegative}} {
		bc, err := plotter.NewBarChart(set.v, w)
		if err != nil {
			return nil, err
		}
		bc.Horizontal = true
		bc.Color = set.col
		bc.LineStyle.Width = 0
		p.Add(bc)
	}
	p.NominalY(padLabels(names)...)
	p.Add(plotter.NewGrid())
	h := 2.2*vg.Centimeter + vg.Length(n)*vg.Points(13)
	return svgBytes(p, 16*vg.Centimeter, h)
}

// heatGrid is the contribution heat map: columns are time buckets, rows
// channels.
type heatGrid struct {
	x    []float64 // bucket centres, Unix seconds
	rows [][]float64
}

func (g *heatGrid) Dims() (c, r int)   { return len(g.x), len(g.rows) }
func (g *heatGrid) Z(c, r int) float64 { return g.rows[r][c] }
func (g *heatGrid) X(c int) float64    { return g.x[c] }
func (g *heatGrid) Y(r int) float64    { return float64(r) }

// heatPalette runs from paper through ochre to a deep rust.
type heatPalette struct{ n int }

func (h heatPalette) Colors() []color.Color {
	out := make([]color.Color, h.n)
	mix := func(a, b color.NRGBA, t float64) color.Color {
		f := func(x, y uint8) uint8 { return uint8(float64(x) + t*(float64(y)-float64(x)) + 0.5) }
		return color.NRGBA{f(a.R, b.R), f(a.G, b.G), f(a.B, b.B), 0xff}
	}
	for i := range out {
		t := float64(i) / float64(h.n-1)
		if t < 0.5 {
			out[i] = mix(heatLow, heatMid, 2*t)
		} else {
			out[i] = mix(heatMid, heatHigh, 2*t-1)
		}
	}
	return out
}

// HeatMax is the contribution ratio (RBC over its own limit) at which the
// heat map saturates.
const HeatMax = 5

// TopChannels is the number of channels in a contribution heat map.
const TopChannels = 12

// contribChart draws the channels of s with the most frames of
// significant contribution (largest ratio first as a tie-break) as a heat
// map of the largest RBC/limit ratio per time bucket. At most maxCols
// columns: neighbouring buckets are merged (max) to fit.
func contribChart(s *series, maxCols int) ([]byte, []string, error) {
	nb := len(s.buckets)
	if nb == 0 || s.p == 0 {
		return nil, nil, nil
	}
	type score struct {
		i         int
		count     int
		sum, peak float64
	}
	sc := make([]score, s.p)
	for i := range sc {
		sc[i].i = i
	}
	for k := 0; k < nb; k++ {
		for i, v := range s.contrib[k*s.p : (k+1)*s.p] {
			if v >= 1 {
				sc[i].count++
			}
			sc[i].sum += float64(v)
			sc[i].peak = math.Max(sc[i].peak, float64(v))
		}
	}
	sort.SliceStable(sc, func(a, b int) bool {
		if sc[a].count != sc[b].count {
			return sc[a].count > sc[b].count
		}
		return sc[a].sum > sc[b].sum
	})
	var top []int
	for _, c := range sc {
		if len(top) == TopChannels || c.peak == 0 {
			break
		}
		top = append(top, c.i)
	}
	if len(top) == 0 {
		return nil, nil, nil
	}
	group := (nb + maxCols - 1) / maxCols
	g := &heatGrid{rows: make([][]float64, len(top))}
	for k := 0; k < nb; k += group {
		end := min(k+group, nb)
		g.x = append(g.x, (float64(s.buckets[k].from)+float64(s.buckets[end-1].to))/2e9)
	}
	names := make([]string, len(top))
	for r, i := range top {
		// Row 0 is drawn at the bottom: put the strongest channel on top.
		row := len(top) - 1 - r
		names[row] = shortName(s.name, s.names[i])
		g.rows[row] = make([]float64, len(g.x))
		for c, k := 0, 0; k < nb; c, k = c+1, k+group {
			v := 0.0
			for j := k; j < min(k+group, nb); j++ {
				v = math.Max(v, float64(s.contrib[j*s.p+i]))
			}
			g.rows[row][c] = math.Min(v, HeatMax)
		}
	}
	if len(g.x) == 1 { // a heat map needs two columns to know a cell's width
		g.x = append(g.x, g.x[0]+1)
		for r := range g.rows {
			g.rows[r] = append(g.rows[r], g.rows[r][0])
		}
	}
	hm := plotter.NewHeatMap(g, heatPalette{n: 64})
	hm.Min, hm.Max = 0, HeatMax
	p := newPlot(fmt.Sprintf("%s: top contributing channels (largest RBC / its limit per point, %g and above in the darkest colour)", s.name, float64(HeatMax)),
		"event time (UTC)", "")
	p.X.Tick.Marker = plot.TimeTicks{Format: "01-02\n15:04"}
	p.Add(hm)
	p.NominalY(padLabels(names)...)
	p.Title.TextStyle.Font.Size = vg.Points(10)
	h := 2.6*vg.Centimeter + vg.Length(len(top))*vg.Points(14)
	b, err := svgBytes(p, 24*vg.Centimeter, h)
	return b, names, err
}

// shortName drops the unit's name from the front of a channel name
// ("coolwater.pump2.flow" in unit coolwater → "pump2.flow"); the chart
// title names the unit.
func shortName(unit, channel string) string {
	if rest, ok := strings.CutPrefix(channel, unit+"."); ok && rest != "" {
		return rest
	}
	return channel
}

// padLabels appends no-break spaces to axis labels. The SVG names its
// font (Liberation Serif) without embedding it, so a viewer without it
// draws the labels in a wider fallback font; the padding keeps them off
// the plot area.
func padLabels(names []string) []string {
	out := make([]string, len(names))
	for i, n := range names {
		out[i] = n + strings.Repeat("\u00a0", 2+len([]rune(n))/6)
	}
	return out
}

// unixSeconds converts a time for the chart axes.
func unixSeconds(t time.Time) float64 { return float64(t.UnixNano()) / 1e9 }
