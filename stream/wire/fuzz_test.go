package wire

import (
	"bytes"
	"encoding/json"
	"os"
	"reflect"
	"testing"
)

func readDoc() (string, error) {
	b, err := os.ReadFile("doc.go")
	return string(b), err
}

// The fuzz targets check three properties of each decoder: it never panics;
// whatever it accepts, encoding/json (the reference decoder of the standard
// library) also accepts with the same value, since the wire decoder is only
// ever stricter; and the accepted value re-encodes to bytes that decode to
// the same value. Seeds live under testdata/fuzz/<Target>/.

func FuzzDecodeSpikes(f *testing.F) {
	f.Add([]byte(`{"unit":["12","12","7"],"t":[20.0031,20.0101,20.0113]}`))
	f.Add([]byte(`{"unit":[],"t":[],"block":"B1"}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := DecodeSpikes(data)
		if err != nil {
			return
		}
		var ref struct {
			Unit  []string  `json:"unit"`
			T     []float64 `json:"t"`
			Block string    `json:"block"`
		}
		if err := json.Unmarshal(data, &ref); err != nil {
			t.Fatalf("wire accepts %q, encoding/json: %v", data, err)
		}
		if !equalSpikes(Spikes{Block: ref.Block, Unit: ref.Unit, T: ref.T}, s) {
			t.Fatalf("%q: wire %+v, encoding/json %+v", data, s, ref)
		}
		b, err := EncodeSpikes(s)
		if err != nil {
			t.Fatalf("re-encode %+v: %v", s, err)
		}
		s2, err := DecodeSpikes(b)
		if err != nil || !equalSpikes(s, s2) {
			t.Fatalf("round trip %s: %+v, %v; want %+v", b, s2, err, s)
		}
	})
}

func FuzzDecodeFrames(f *testing.F) {
	f.Add([]byte(`{"block":"B1","index":[1200,1201],"t":[20.0,20.0167]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		fr, err := DecodeFrames(data)
		if err != nil {
			return
		}
		var ref Frames
		if err := json.Unmarshal(data, &ref); err != nil {
			t.Fatalf("wire accepts %q, encoding/json: %v", data, err)
		}
		if ref.Block != fr.Block || !reflect.DeepEqual(norm64(ref.Index), norm64(fr.Index)) || !reflect.DeepEqual(normf(ref.T), normf(fr.T)) {
			t.Fatalf("%q: wire %+v, encoding/json %+v", data, fr, ref)
		}
		b, err := EncodeFrames(fr)
		if err != nil {
			t.Fatalf("re-encode %+v: %v", fr, err)
		}
		fr2, err := DecodeFrames(b)
		if err != nil || !reflect.DeepEqual(norm64(fr.Index), norm64(fr2.Index)) || !reflect.DeepEqual(normf(fr.T), normf(fr2.T)) || fr.Block != fr2.Block {
			t.Fatalf("round trip %s: %+v, %v; want %+v", b, fr2, err, fr)
		}
	})
}

func FuzzDecodeBlock(f *testing.F) {
	f.Add([]byte(`{"kind":"start","block":"B1","t":12.5,"stimulus":{"type":"binary","width":16,"height":16,"seed":42,"contrast":1},"lags":12,"frame_period":0.016667,"geometry":{"distance_cm":57,"pixel_size_cm":1.0}}`))
	f.Add([]byte(`{"kind":"end","block":"B1","t":1812.5}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		b, err := DecodeBlock(data)
		if err != nil {
			return
		}
		var ref struct {
			Kind        string          `json:"kind"`
			Block       string          `json:"block"`
			T           float64         `json:"t"`
			Stimulus    json.RawMessage `json:"stimulus"`
			Lags        *int            `json:"lags"`
			FramePeriod *float64        `json:"frame_period"`
			Geometry    *Geometry       `json:"geometry"`
		}
		if err := json.Unmarshal(data, &ref); err != nil {
			t.Fatalf("wire accepts %q, encoding/json: %v", data, err)
		}
		want := Block{Kind: ref.Kind, Block: ref.Block, T: ref.T, Stimulus: ref.Stimulus, Geometry: ref.Geometry}
		if ref.Kind == KindStart {
			want.Lags, want.FramePeriod = DefaultLags, DefaultFramePeriod
			if ref.Lags != nil {
				want.Lags = *ref.Lags
			}
			if ref.FramePeriod != nil {
				want.FramePeriod = *ref.FramePeriod
			}
		}
		if !reflect.DeepEqual(want, b) {
			t.Fatalf("%q: wire %+v, encoding/json %+v", data, b, want)
		}
		enc, err := EncodeBlock(b)
		if err != nil {
			t.Fatalf("re-encode %+v: %v", b, err)
		}
		b2, err := DecodeBlock(enc)
		if err != nil || !reflect.DeepEqual(b, b2) {
			t.Fatalf("round trip %s: %+v, %v; want %+v", enc, b2, err, b)
		}
	})
}

func FuzzDecodeControl(f *testing.F) {
	f.Add([]byte(`{"command":"reset"}`))
	f.Add([]byte(`{"command":"flag_stc","unit":"12"}`))
	f.Add([]byte(`{"command":"criterion","target":0.9,"fraction":0.8}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := DecodeControl(data)
		if err != nil {
			return
		}
		var ref Control
		if err := json.Unmarshal(data, &ref); err != nil || ref != c {
			t.Fatalf("wire accepts %q as %+v, encoding/json %+v, %v", data, c, ref, err)
		}
		enc, err := EncodeControl(c)
		if err != nil {
			t.Fatalf("re-encode %+v: %v", c, err)
		}
		c2, err := DecodeControl(enc)
		if err != nil || c2 != c || !bytes.Equal(enc, mustEncode(t, c2)) {
			t.Fatalf("round trip %s: %+v, %v; want %+v", enc, c2, err, c)
		}
	})
}

func mustEncode(t *testing.T, c Control) []byte {
	b, err := EncodeControl(c)
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// norm64 and normf map empty and nil slices alike.
func norm64(v []int64) []int64 {
	if len(v) == 0 {
		return nil
	}
	return v
}

func normf(v []float64) []float64 {
	if len(v) == 0 {
		return nil
	}
	return v
}
