package bench

import (
	"encoding/json"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"
)

// Figure is one measured value of a row.
type Figure struct {
	Key   string  `json:"key"`
	Value float64 `json:"value"`
	Unit  string  `json:"unit,omitempty"`
}

// Row is one line of the bench table.
type Row struct {
	Section string   `json:"section"` // filter | engine | pipeline | mqtt
	Name    string   `json:"name"`
	Figures []Figure `json:"figures"`
	Note    string   `json:"note,omitempty"`
}

// Get returns the value of the figure key and whether the row has it.
func (r Row) Get(key string) (float64, bool) {
	for _, f := range r.Figures {
		if f.Key == key {
			return f.Value, true
		}
	}
	return 0, false
}

func (r *Row) add(key string, v float64, unit string) {
	r.Figures = append(r.Figures, Figure{Key: key, Value: v, Unit: unit})
}

// Report is a whole bench run.
type Report struct {
	GoVersion string   `json:"go_version"`
	OS        string   `json:"os"`
	Arch      string   `json:"arch"`
	CPUs      int      `json:"cpus"`
	Broker    string   `json:"broker,omitempty"`
	Rows      []Row    `json:"rows"`
	Errors    []string `json:"errors,omitempty"`
}

// WriteJSON writes the report as one indented JSON document.
func (r *Report) WriteJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(r)
}

// WriteTable writes the report as an aligned text table, one row a line.
func (r *Report) WriteTable(w io.Writer) error {
	fmt.Fprintf(w, "godwit bench  %s %s/%s, %d CPU", r.GoVersion, r.OS, r.Arch, r.CPUs)
	if r.Broker != "" {
		fmt.Fprintf(w, ", broker %s", r.Broker)
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 2, 8, 2, ' ', 0)
	fmt.Fprintln(tw, "section\tworkload\tfigures\tnote")
	for _, row := range r.Rows {
		var b strings.Builder
		for i, f := range row.Figures {
			if i > 0 {
				b.WriteString("  ")
			}
			fmt.Fprintf(&b, "%s %s", f.Key, formatValue(f.Value))
			if f.Unit != "" {
				b.WriteString(" " + f.Unit)
			}
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\n", row.Section, row.Name, b.String(), row.Note)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, e := range r.Errors {
		fmt.Fprintln(w, "error:", e)
	}
	return nil
}

func formatValue(v float64) string {
	switch a := abs(v); {
	case v == float64(int64(v)) && a < 1e12:
		return fmt.Sprintf("%d", int64(v))
	case a >= 100:
		return fmt.Sprintf("%.0f", v)
	case a >= 1:
		return fmt.Sprintf("%.2f", v)
	default:
		return fmt.Sprintf("%.3g", v)
	}
}

func abs(v float64) float64 {
	if v < 0 {
		return -v
	}
	return v
}
