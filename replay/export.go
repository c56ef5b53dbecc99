package replay

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"livefield/display"
	"livefield/online"
	"livefield/replay/session"
	"livefield/stream/ingest"
	"livefield/stream/npy"
)

// ExportOptions configure Export.
type ExportOptions struct {
	Feed FeedOptions
	// Block is the block to export ("" for the last one in the session).
	Block string
	// OnDamage is told of damaged spans of the file (they are skipped).
	OnDamage func(*session.CorruptError)
	// Progress, when set, is called about once per ProgressEvery of wall
	// time with the counts so far, and once at the end (PassOptions).
	Progress      func(ingest.Health)
	ProgressEvery time.Duration
	// Poisson adds the Poisson refinement of every unit's smooth-local
	// estimate (online.BinStore.PoissonMAP): the bins of the exported block
	// are kept in compact form during the run, and after it each unit with
	// a smooth-local estimate gets units/<name>.poisson.npy and the
	// PoissonSummary fields in its JSON. PoissonProgress, when set, is told
	// of the units refined so far: once with none before the first starts,
	// then after each (from the refining goroutines, one call at a time).
	Poisson         bool
	PoissonProgress func(done, total int)
}

// UnitFile is the content of units/<name>.json: one unit's summary, its
// features and the layout of its NPY files.
type UnitFile struct {
	online.UnitSummary
	Shape       [3]int          `json:"shape"` // lags, height, width of both NPY files
	FramePeriod online.Float    `json:"frame_period_s"`
	Intercept   online.Float    `json:"intercept"`
	Features    online.Features `json:"features"`
	Ridge       string          `json:"ridge_file"` // relative to the export directory
	STA         string          `json:"sta_file"`
	// Prior is the smooth-local estimate's file, empty when the unit has
	// none; PriorHyper, PriorLogEvidence, PriorBins and PriorReliability
	// describe it (online.UnitDetail).
	Prior            string              `json:"prior_file,omitempty"`
	PriorHyper       *online.SmoothLocal `json:"prior_hyper"`
	PriorLogEvidence online.Float        `json:"prior_log_evidence"`
	PriorBins        int64               `json:"prior_bins"`
	PriorReliability online.Float        `json:"prior_reliability"`
	PriorWindow      *online.PriorWindow `json:"prior_window,omitempty"`
	// PoissonSummary is present when the export refined the unit
	// (ExportOptions.Poisson).
	*PoissonSummary
}

// Exported lists what Export wrote.
type Exported struct {
	Block   string   `json:"block"`
	Units   []string `json:"units"` // unit ids, in the order of the snapshot
	Files   []string `json:"files"` // paths relative to the directory
	Records int64    `json:"records"`
	Damaged int64    `json:"damaged"`
	// Poisson counts the Poisson refinement (ExportOptions.Poisson).
	Poisson PoissonCounts `json:"poisson"`
	// Final is the snapshot the files were written from.
	Final *online.Snapshot `json:"-"`
}

// Export runs the whole session at full speed and writes the final
// estimates of one block into dir (created if needed):
//
//	summary.json          the block's final snapshot (block summary and unit summaries)
//	contact.png           every unit's map at its peak lag (display.RenderOverview)
//	units/<name>.npy      ridge weights, float64, shape (lags, height, width)
//	units/<name>.sta.npy  spike-triggered average, same shape
//	units/<name>.prior.npy  smooth-local estimate, same shape (units that have one)
//	units/<name>.poisson.npy  its Poisson refinement, same shape (with Poisson)
//	units/<name>.json     UnitFile
//
// where <name> is the unit id with every byte outside [A-Za-z0-9_-]
// written as %XX.
func Export(ctx context.Context, r *session.Reader, dir string, opt ExportOptions) (Exported, error) {
	var out Exported
	var final *online.Snapshot
	var finalBlock string
	fo := opt.Feed
	if fo.UpdateEvery == 0 {
		// Only the final estimates are written: feed every bin, then one
		// update at the block end.
		fo.UpdateEvery = FinalOnly
	}
	// The estimator works beside the decoding; the estimates are the same.
	fo.Pipelined = true
	user := fo.OnBlockEnd
	fo.OnBlockEnd = func(block string, s *online.Snapshot, at time.Time) {
		if opt.Block == "" || block == opt.Block {
			final, finalBlock = s, block
		}
		if user != nil {
			user(block, s, at)
		}
	}
	var col *binCollector
	if opt.Poisson {
		col = &binCollector{want: opt.Block}
		userBin := fo.OnBin
		fo.OnBin = func(block string, m *online.Mapper, frame []float64, counts []online.Count) {
			col.add(block, m, frame, counts)
			if userBin != nil {
				userBin(block, m, frame, counts)
			}
		}
	}
	f, err := NewFeeder(fo)
	if err != nil {
		return out, err
	}
	defer f.Close()
	played, err := f.FeedSession(ctx, r, PassOptions{OnDamage: opt.OnDamage, Progress: opt.Progress, ProgressEvery: opt.ProgressEvery})
	out.Records, out.Damaged = played.Records, played.Damaged
	if err != nil {
		return out, err
	}
	f.Finish()
	if opt.Progress != nil {
		opt.Progress(f.Health())
	}
	if final == nil {
		if opt.Block != "" {
			return out, fmt.Errorf("replay: the session has no block %q", opt.Block)
		}
		return out, errors.New("replay: the session has no block")
	}
	out.Block, out.Final = finalBlock, final
	if err := os.MkdirAll(filepath.Join(dir, "units"), 0o755); err != nil {
		return out, fmt.Errorf("replay: %w", err)
	}
	var fits map[string]online.PoissonFit
	var fails map[string]error
	if col != nil {
		// The estimator is done with: give its memory back before the
		// refinement adds its own (the whole export stays within the
		// reference workload's 400 MB).
		f.Close()
		col.mapper = nil
		debug.FreeOSMemory()
		fits, fails, out.Poisson = refinePoisson(col, final, finalBlock, opt)
		col.store = nil // the bins are no longer needed
	}
	// The units' files are encoded and written on all cores, the contact
	// sheet and the summary beside them; the list of files keeps the units'
	// order.
	units := make([]writtenUnit, len(final.Units))
	var next atomic.Int64
	var wg sync.WaitGroup
	for range max(runtime.GOMAXPROCS(0), 1) {
		wg.Go(func() {
			var buf bytes.Buffer
			for {
				i := int(next.Add(1)) - 1
				if i >= len(units) {
					return
				}
				units[i] = writeUnit(dir, final, final.Units[i].ID, fits, fails, &buf)
			}
		})
	}
	var whole writtenUnit
	wg.Go(func() { whole = writeWhole(dir, final) })
	wg.Wait()
	for _, w := range append(units, whole) {
		out.Files = append(out.Files, w.files...)
		if w.err != nil {
			return out, w.err
		}
		if w.id != "" {
			out.Units = append(out.Units, w.id)
		}
	}
	return out, nil
}

// writtenUnit is what writeUnit wrote: the files (relative to the export
// directory), the unit's ID ("" when it has no detail) or the error that
// stopped it.
type writtenUnit struct {
	files []string
	id    string
	err   error
}

func (w *writtenUnit) write(dir, rel string, b []byte) error {
	if err := os.WriteFile(filepath.Join(dir, rel), b, 0o644); err != nil {
		w.err = fmt.Errorf("replay: %w", err)
		return w.err
	}
	w.files = append(w.files, rel)
	return nil
}

// writeUnit writes one unit's arrays as NPY and its summary as JSON; buf
// is the caller's scratch.
func writeUnit(dir string, final *online.Snapshot, id string, fits map[string]online.PoissonFit, fails map[string]error, buf *bytes.Buffer) (w writtenUnit) {
	d, ok := final.Detail(id)
	if !ok {
		return w
	}
	name := "units/" + FileName(id)
	uf := UnitFile{
		UnitSummary: d.UnitSummary, Shape: d.Shape, FramePeriod: d.FramePeriod,
		Intercept: d.Intercept, Features: d.Features,
		Ridge: name + ".npy", STA: name + ".sta.npy",
		PriorHyper: d.PriorHyper, PriorLogEvidence: d.PriorLogEvidence, PriorBins: d.PriorBins,
		PriorReliability: d.PriorReliability, PriorWindow: d.PriorWindow,
	}
	type array struct {
		rel string
		v   online.Floats
	}
	arrays := []array{{uf.Ridge, d.Ridge}, {uf.STA, d.STA}}
	if d.Prior != nil {
		uf.Prior = name + ".prior.npy"
		arrays = append(arrays, array{uf.Prior, d.Prior})
	}
	if fit, ok := fits[id]; ok {
		uf.PoissonSummary = &PoissonSummary{
			PoissonFile: name + ".poisson.npy", PoissonLogPosterior: online.Float(fit.LogPosterior),
			PoissonIterations: fit.Iterations, PoissonConverged: fit.Converged, PoissonIntercept: online.Float(fit.Intercept),
		}
		arrays = append(arrays, array{uf.PoissonFile, online.FloatsOf(fit.Weights)})
	} else if err, ok := fails[id]; ok {
		nan := online.Float(math.NaN())
		uf.PoissonSummary = &PoissonSummary{PoissonError: err.Error(), PoissonLogPosterior: nan, PoissonIntercept: nan}
	}
	shape := d.Shape[:]
	for _, a := range arrays {
		buf.Reset()
		if err := npy.Write(buf, shape, floats64(a.v)); err != nil {
			w.err = fmt.Errorf("replay: unit %q: %w", id, err)
			return w
		}
		if w.write(dir, a.rel, buf.Bytes()) != nil {
			return w
		}
	}
	b, err := json.MarshalIndent(uf, "", "  ")
	if err != nil {
		w.err = fmt.Errorf("replay: unit %q: %w", id, err)
		return w
	}
	if w.write(dir, name+".json", append(b, '\n')) != nil {
		return w
	}
	w.id = id
	return w
}

// writeWhole writes the contact sheet and the block's summary.
func writeWhole(dir string, final *online.Snapshot) (w writtenUnit) {
	var buf bytes.Buffer
	if err := display.RenderOverview(&buf, final); err != nil {
		w.err = fmt.Errorf("replay: contact sheet: %w", err)
		return w
	}
	if w.write(dir, "contact.png", buf.Bytes()) != nil {
		return w
	}
	b, err := json.MarshalIndent(final, "", "  ")
	if err != nil {
		w.err = fmt.Errorf("replay: summary: %w", err)
		return w
	}
	w.write(dir, "summary.json", append(b, '\n'))
	return w
}

func floats64(v online.Floats) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = float64(x)
	}
	return out
}

// FileName turns a unit id into a safe file name: letters, digits, '_', '-'
// and '.' (except as the first byte) stay, every other byte becomes %XX (so
// "..", "/" and hidden names cannot arise, and distinct ids give distinct
// names).
func FileName(id string) string {
	var b strings.Builder
	for i := 0; i < len(id); i++ {
		c := id[i]
		switch {
		case c >= 'a' && c <= 'z', c >= 'A' && c <= 'Z', c >= '0' && c <= '9', c == '_', c == '-',
			c == '.' && i > 0: // "ch07.1" stays readable; a leading dot would hide the file or name "." and ".."
			b.WriteByte(c)
		default:
			fmt.Fprintf(&b, "%%%02X", c)
		}
	}
	return b.String()
}
