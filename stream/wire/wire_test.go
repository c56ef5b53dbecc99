package wire

import (
	"encoding/json"
	"errors"
	"math"
	"reflect"
	"strings"
	"testing"
)

// reasonOf returns the Reason of a wire error, or "" for nil.
func reasonOf(t *testing.T, err error) string {
	t.Helper()
	if err == nil {
		return ""
	}
	var we *Error
	if !errors.As(err, &we) {
		t.Fatalf("error %v is not a *wire.Error", err)
	}
	if !strings.HasPrefix(err.Error(), "wire: "+we.Reason) {
		t.Errorf("error text %q lacks the package and reason prefix", err)
	}
	return we.Reason
}

var long = strings.Repeat("x", MaxID+1)

func TestDecodeSpikesRejects(t *testing.T) {
	tests := []struct {
		name, in, reason string
	}{
		{"empty input", ``, ReasonSyntax},
		{"malformed", `{"unit":["1"],"t":[1]`, ReasonSyntax},
		{"bare word", `{"unit":[tru],"t":[1]}`, ReasonSyntax},
		{"trailing data", `{"unit":["1"],"t":[1]} {}`, ReasonTrailing},
		{"trailing comma", `{"unit":["1"],"t":[1,]}`, ReasonSyntax},
		{"not an object", `[1,2]`, ReasonWrongType},
		{"unit not strings", `{"unit":[12],"t":[1]}`, ReasonWrongType},
		{"t as string", `{"unit":["1"],"t":["1"]}`, ReasonWrongType},
		{"t null", `{"unit":["1"],"t":null}`, ReasonWrongType},
		{"time null", `{"unit":["1"],"t":[null]}`, ReasonWrongType},
		{"duplicate key", `{"unit":["1"],"t":[1],"t":[2]}`, ReasonDuplicateKey},
		{"escaped duplicate", `{"unit":["1"],"t":[1],"\u0074":[2]}`, ReasonDuplicateKey},
		{"case variant", `{"Unit":["1"],"t":[1]}`, ReasonCaseKey},
		{"kelvin fold", "{\"unit\":[\"1\"],\"t\":[1],\"bloc\u212a\":\"B\"}", ReasonCaseKey},
		{"missing t", `{"unit":["1"]}`, ReasonMissingField},
		{"missing unit", `{"t":[1]}`, ReasonMissingField},
		{"huge number", `{"unit":["1"],"t":[1e400]}`, ReasonNonFinite},
		{"negative time", `{"unit":["1"],"t":[-0.5]}`, ReasonNegativeTime},
		{"backwards", `{"unit":["1","2"],"t":[2,1]}`, ReasonTimeOrder},
		{"unequal arrays", `{"unit":["1","2"],"t":[1]}`, ReasonLengthMismatch},
		{"empty unit", `{"unit":[""],"t":[1]}`, ReasonBadUnit},
		{"long unit", `{"unit":["` + long + `"],"t":[1]}`, ReasonBadUnit},
		{"empty block", `{"unit":[],"t":[],"block":""}`, ReasonBadBlock},
		{"bad utf8", "{\"unit\":[\"\xff\"],\"t\":[1]}", ReasonSyntax},
		{"lone surrogate", `{"unit":["\ud800"],"t":[1]}`, ReasonSyntax},
		{"raw control char", "{\"unit\":[\"a\tb\"],\"t\":[1]}", ReasonSyntax},
		{"deep unknown", `{"unit":[],"t":[],"x":` + strings.Repeat("[", 40) + strings.Repeat("]", 40) + `}`, ReasonTooDeep},
		// RFC 8259 §6 number grammar: no leading zeros, no leading '+',
		// digits on both sides of '.', no hex, no Infinity/NaN.
		{"leading zero", `{"unit":["1"],"t":[01]}`, ReasonSyntax},
		{"plus sign", `{"unit":["1"],"t":[+1]}`, ReasonSyntax},
		{"bare fraction", `{"unit":["1"],"t":[.5]}`, ReasonSyntax},
		{"bare point", `{"unit":["1"],"t":[1.]}`, ReasonSyntax},
		{"empty exponent", `{"unit":["1"],"t":[1e]}`, ReasonSyntax},
		{"hex", `{"unit":["1"],"t":[0x10]}`, ReasonSyntax},
		{"NaN", `{"unit":["1"],"t":[NaN]}`, ReasonSyntax},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s, err := DecodeSpikes([]byte(tc.in))
			if got := reasonOf(t, err); got != tc.reason {
				t.Fatalf("DecodeSpikes(%q) reason %q (%v), want %q", tc.in, got, err, tc.reason)
			}
			if !reflect.DeepEqual(s, Spikes{}) {
				t.Errorf("rejected message returned a partial value %+v", s)
			}
		})
	}
}

// TestDecoderChecksIDsOnce: a Decoder checks a unit id the first time it
// reads it and remembers only valid ones, so a bad id is refused each time
// it comes, after valid messages and after a block id of the same text.
func TestDecoderChecksIDsOnce(t *testing.T) {
	var d Decoder
	var s Spikes
	for i, tc := range []struct{ in, reason string }{
		{`{"unit":["a","b","a"],"t":[1,2,3]}`, ""},
		{`{"unit":["a",""],"t":[1,2]}`, ReasonBadUnit},
		{`{"unit":["a",""],"t":[1,2]}`, ReasonBadUnit},
		{`{"unit":["b","` + long + `"],"t":[1,2]}`, ReasonBadUnit},
		{`{"unit":["a"],"t":[1],"block":"` + long + `"}`, ReasonBadBlock},
		{`{"unit":["` + long + `"],"t":[1]}`, ReasonBadUnit},
		{`{"unit":["b","a"],"t":[1,2]}`, ""},
	} {
		err := d.SpikesTo(&s, []byte(tc.in))
		if got := reasonOf(t, err); got != tc.reason {
			t.Fatalf("message %d: reason %q (%v), want %q", i, got, err, tc.reason)
		}
	}
	if s.Unit[0] != "b" || s.Unit[1] != "a" {
		t.Fatalf("last message's units %q", s.Unit)
	}
}

func TestDecodeSpikesTooLarge(t *testing.T) {
	d := Decoder{MaxSize: 32}
	var s Spikes
	err := d.SpikesTo(&s, []byte(`{"unit":["1","2","3"],"t":[1,2,3]}`))
	if got := reasonOf(t, err); got != ReasonTooLarge {
		t.Fatalf("reason %q, want %q", got, ReasonTooLarge)
	}
	big := make([]byte, DefaultMaxSize+1)
	if got := reasonOf(t, func() error { _, err := DecodeSpikes(big); return err }()); got != ReasonTooLarge {
		t.Fatalf("default limit: reason %q, want %q", got, ReasonTooLarge)
	}
}

func TestDecodeSpikesAccepts(t *testing.T) {
	tests := []struct {
		name, in string
		want     Spikes
	}{
		{"example", `{"unit":["12","12","7"],"t":[20.0031,20.0101,20.0113]}`,
			Spikes{Unit: []string{"12", "12", "7"}, T: []float64{20.0031, 20.0101, 20.0113}}},
		{"with block and spaces", " {\n\t\"block\" : \"B1\" , \"t\":[0, 0] ,\"unit\":[\"a\",\"b\"]}\r\n",
			Spikes{Block: "B1", Unit: []string{"a", "b"}, T: []float64{0, 0}}},
		{"unknown key skipped", `{"unit":["1"],"t":[1],"channel":{"x":[1,true,null,"s"]}}`,
			Spikes{Unit: []string{"1"}, T: []float64{1}}},
		{"escapes", `{"unit":["a\"\\\/\u00e9\ud83d\ude00"],"t":[1E+2]}`,
			Spikes{Unit: []string{"a\"\\/é😀"}, T: []float64{100}}},
		{"negative zero exponent forms", `{"unit":["1","1"],"t":[-0,2.5e-1]}`,
			Spikes{Unit: []string{"1", "1"}, T: []float64{0, 0.25}}},
		{"id of 64 bytes", `{"unit":["` + long[:MaxID] + `"],"t":[3]}`,
			Spikes{Unit: []string{long[:MaxID]}, T: []float64{3}}},
		{"empty batch", `{"unit":[],"t":[]}`, Spikes{Unit: []string{}, T: []float64{}}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := DecodeSpikes([]byte(tc.in))
			if err != nil {
				t.Fatalf("DecodeSpikes(%q): %v", tc.in, err)
			}
			if !equalSpikes(got, tc.want) {
				t.Fatalf("DecodeSpikes(%q) = %+v, want %+v", tc.in, got, tc.want)
			}
			// Reference: encoding/json reads the same message to the same value.
			var ref Spikes
			if err := json.Unmarshal([]byte(tc.in), &ref); err != nil || !equalSpikes(ref, got) {
				t.Fatalf("encoding/json reads %+v (%v), wire %+v", ref, err, got)
			}
		})
	}
}

func equalSpikes(a, b Spikes) bool {
	return a.Block == b.Block && len(a.Unit) == len(b.Unit) && len(a.T) == len(b.T) &&
		(len(a.Unit) == 0 || reflect.DeepEqual(a.Unit, b.Unit)) && (len(a.T) == 0 || reflect.DeepEqual(a.T, b.T))
}

func TestDecodeFramesRejects(t *testing.T) {
	tests := []struct {
		name, in, reason string
	}{
		{"missing block", `{"index":[1],"t":[1]}`, ReasonMissingField},
		{"missing index", `{"block":"B1","t":[1]}`, ReasonMissingField},
		{"index fraction", `{"block":"B1","index":[1.5],"t":[1]}`, ReasonWrongType},
		{"index exponent", `{"block":"B1","index":[1e3],"t":[1]}`, ReasonWrongType},
		{"index overflow", `{"block":"B1","index":[9223372036854775808],"t":[1]}`, ReasonWrongType},
		{"negative index", `{"block":"B1","index":[-1],"t":[1]}`, ReasonNegativeIndex},
		{"index repeats", `{"block":"B1","index":[4,4],"t":[1,2]}`, ReasonIndexOrder},
		{"equal onsets", `{"block":"B1","index":[4,5],"t":[1,1]}`, ReasonTimeOrder},
		{"onsets backwards", `{"block":"B1","index":[4,5],"t":[2,1]}`, ReasonTimeOrder},
		{"unequal", `{"block":"B1","index":[4,5],"t":[1]}`, ReasonLengthMismatch},
		{"long block", `{"block":"` + long + `","index":[],"t":[]}`, ReasonBadBlock},
		{"block number", `{"block":1,"index":[],"t":[]}`, ReasonWrongType},
		{"negative onset", `{"block":"B1","index":[1],"t":[-1e-9]}`, ReasonNegativeTime},
		{"case variant", `{"block":"B1","INDEX":[1],"t":[1]}`, ReasonCaseKey},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f, err := DecodeFrames([]byte(tc.in))
			if got := reasonOf(t, err); got != tc.reason {
				t.Fatalf("DecodeFrames(%q) reason %q (%v), want %q", tc.in, got, err, tc.reason)
			}
			if !reflect.DeepEqual(f, Frames{}) {
				t.Errorf("partial value %+v", f)
			}
		})
	}
}

func TestDecodeFrames(t *testing.T) {
	in := `{"block":"B1","index":[1200,1201],"t":[20.0,20.0167]}`
	f, err := DecodeFrames([]byte(in))
	if err != nil {
		t.Fatal(err)
	}
	want := Frames{Block: "B1", Index: []int64{1200, 1201}, T: []float64{20.0, 20.0167}}
	if !reflect.DeepEqual(f, want) {
		t.Fatalf("got %+v, want %+v", f, want)
	}
}

func TestDecodeBlockRejects(t *testing.T) {
	stim := `"stimulus":{"type":"binary","width":16,"height":16,"seed":42,"contrast":1}`
	tests := []struct {
		name, in, reason string
	}{
		{"unknown kind", `{"kind":"pause","block":"B1","t":1}`, ReasonUnknownKind},
		{"missing kind", `{"block":"B1","t":1}`, ReasonMissingField},
		{"missing t", `{"kind":"end","block":"B1"}`, ReasonMissingField},
		{"start without stimulus", `{"kind":"start","block":"B1","t":1}`, ReasonMissingField},
		{"stimulus not object", `{"kind":"start","block":"B1","t":1,"stimulus":"binary"}`, ReasonBadStimulus},
		{"stimulus null", `{"kind":"start","block":"B1","t":1,"stimulus":null}`, ReasonBadStimulus},
		{"stimulus broken", `{"kind":"start","block":"B1","t":1,"stimulus":{"a":}}`, ReasonSyntax},
		{"stimulus deep", `{"kind":"start","block":"B1","t":1,"stimulus":{"a":` + strings.Repeat("[", 40) + strings.Repeat("]", 40) + `}}`, ReasonTooDeep},
		{"lags zero", `{"kind":"start","block":"B1","t":1,` + stim + `,"lags":0}`, ReasonBadLags},
		{"lags huge", `{"kind":"start","block":"B1","t":1,` + stim + `,"lags":257}`, ReasonBadLags},
		{"lags fraction", `{"kind":"start","block":"B1","t":1,` + stim + `,"lags":1.5}`, ReasonWrongType},
		{"frame period zero", `{"kind":"start","block":"B1","t":1,` + stim + `,"frame_period":0}`, ReasonBadFramePeriod},
		{"geometry negative", `{"kind":"start","block":"B1","t":1,` + stim + `,"geometry":{"distance_cm":-57,"pixel_size_cm":1}}`, ReasonBadGeometry},
		{"geometry partial", `{"kind":"start","block":"B1","t":1,` + stim + `,"geometry":{"distance_cm":57}}`, ReasonBadGeometry},
		{"geometry case key", `{"kind":"start","block":"B1","t":1,` + stim + `,"geometry":{"Distance_CM":57,"pixel_size_cm":1}}`, ReasonCaseKey},
		{"end with lags", `{"kind":"end","block":"B1","t":1,"lags":12}`, ReasonUnexpectedField},
		{"empty block", `{"kind":"end","block":"","t":1}`, ReasonBadBlock},
		{"infinite t", `{"kind":"end","block":"B1","t":-1e999}`, ReasonNonFinite},
		{"negative t", `{"kind":"end","block":"B1","t":-1}`, ReasonNegativeTime},
		{"duplicate kind", `{"kind":"end","kind":"start","block":"B1","t":1}`, ReasonDuplicateKey},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			b, err := DecodeBlock([]byte(tc.in))
			if got := reasonOf(t, err); got != tc.reason {
				t.Fatalf("DecodeBlock(%q) reason %q (%v), want %q", tc.in, got, err, tc.reason)
			}
			if !reflect.DeepEqual(b, Block{}) {
				t.Errorf("partial value %+v", b)
			}
		})
	}
}

func TestDecodeBlock(t *testing.T) {
	stim := `{"type":"binary","width":16,"height":16,"seed":42,"contrast":1}`
	tests := []struct {
		name, in string
		want     Block
	}{
		{"full start",
			`{"kind":"start","block":"B1","t":12.5,"stimulus":` + stim + `,"lags":12,"frame_period":0.016667,"geometry":{"distance_cm":57,"pixel_size_cm":1.0}}`,
			Block{Kind: KindStart, Block: "B1", T: 12.5, Stimulus: json.RawMessage(stim), Lags: 12, FramePeriod: 0.016667, Geometry: &Geometry{57, 1}}},
		{"defaults", `{"kind":"start","block":"B2","t":0,"stimulus":{}}`,
			Block{Kind: KindStart, Block: "B2", Stimulus: json.RawMessage(`{}`), Lags: DefaultLags, FramePeriod: DefaultFramePeriod}},
		{"end", `{"kind":"end","block":"B1","t":1812.5}`, Block{Kind: KindEnd, Block: "B1", T: 1812.5}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := DecodeBlock([]byte(tc.in))
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(got, tc.want) {
				t.Fatalf("got %+v, want %+v", got, tc.want)
			}
		})
	}
}

func TestDecodeControl(t *testing.T) {
	tests := []struct {
		name, in string
		want     Control
		reason   string
	}{
		{"reset", `{"command":"reset"}`, Control{Command: CommandReset}, ""},
		{"flag", `{"command":"flag_stc","unit":"12"}`, Control{Command: CommandFlagSTC, Unit: "12"}, ""},
		{"unflag", `{"command":"unflag_stc","unit":"12"}`, Control{Command: CommandUnflagSTC, Unit: "12"}, ""},
		{"criterion", `{"command":"criterion","target":0.9,"fraction":0.8}`, Control{Command: CommandCriterion, Target: 0.9, Fraction: 0.8}, ""},
		{"unknown", `{"command":"explode"}`, Control{}, ReasonUnknownCommand},
		{"missing command", `{"unit":"12"}`, Control{}, ReasonMissingField},
		{"flag without unit", `{"command":"flag_stc"}`, Control{}, ReasonMissingField},
		{"flag empty unit", `{"command":"flag_stc","unit":""}`, Control{}, ReasonBadUnit},
		{"reset with unit", `{"command":"reset","unit":"12"}`, Control{}, ReasonUnexpectedField},
		{"reset with zero target", `{"command":"reset","target":0}`, Control{}, ReasonUnexpectedField},
		// The range is checked by online.Criterion where it is used (ingest).
		{"criterion above one", `{"command":"criterion","target":1.5,"fraction":0.8}`, Control{Command: CommandCriterion, Target: 1.5, Fraction: 0.8}, ""},
		{"criterion missing fraction", `{"command":"criterion","target":0.9}`, Control{}, ReasonMissingField},
		{"command number", `{"command":1}`, Control{}, ReasonWrongType},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := DecodeControl([]byte(tc.in))
			if r := reasonOf(t, err); r != tc.reason {
				t.Fatalf("DecodeControl(%q) reason %q (%v), want %q", tc.in, r, err, tc.reason)
			}
			if got != tc.want {
				t.Fatalf("got %+v, want %+v", got, tc.want)
			}
		})
	}
}

func TestEncodeRejects(t *testing.T) {
	tests := []struct {
		name   string
		encode func() error
		reason string
	}{
		{"spikes NaN", func() error {
			_, err := EncodeSpikes(Spikes{Unit: []string{"1"}, T: []float64{math.NaN()}})
			return err
		}, ReasonNonFinite},
		{"spikes unequal", func() error { _, err := EncodeSpikes(Spikes{Unit: []string{"1"}}); return err }, ReasonLengthMismatch},
		{"spikes bad utf8", func() error { _, err := EncodeSpikes(Spikes{Unit: []string{"\xff"}, T: []float64{1}}); return err }, ReasonBadUnit},
		{"frames backwards", func() error {
			_, err := EncodeFrames(Frames{Block: "B", Index: []int64{1, 2}, T: []float64{2, 1}})
			return err
		}, ReasonTimeOrder},
		{"block kind", func() error { _, err := EncodeBlock(Block{Kind: "x", Block: "B"}); return err }, ReasonUnknownKind},
		{"start bad stimulus", func() error {
			_, err := EncodeBlock(Block{Kind: KindStart, Block: "B", Stimulus: json.RawMessage(`{"a":1`)})
			return err
		}, ReasonSyntax},
		{"control unknown", func() error { _, err := EncodeControl(Control{Command: "x"}); return err }, ReasonUnknownCommand},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := reasonOf(t, tc.encode()); got != tc.reason {
				t.Fatalf("reason %q, want %q", got, tc.reason)
			}
		})
	}
}

func TestEncodeRoundTrip(t *testing.T) {
	s := Spikes{Block: "B\"1\n", Unit: []string{"ch07.1", "\x01é", "7"}, T: []float64{0.1, 1.0 / 3, 1e21}}
	b, err := EncodeSpikes(s)
	if err != nil {
		t.Fatal(err)
	}
	got, err := DecodeSpikes(b)
	if err != nil || !reflect.DeepEqual(got, s) {
		t.Fatalf("round trip %s: %+v, %v", b, got, err)
	}
	// Reference: the encoding is valid JSON for encoding/json too.
	if !json.Valid(b) {
		t.Fatalf("encoding/json rejects %s", b)
	}
	blk := Block{Kind: KindStart, Block: "B1", T: 12.5, Stimulus: json.RawMessage(`{"type":"binary"}`), Geometry: &Geometry{57, 1}}
	b, err = EncodeBlock(blk)
	if err != nil {
		t.Fatal(err)
	}
	gotb, err := DecodeBlock(b)
	blk.Lags, blk.FramePeriod = DefaultLags, DefaultFramePeriod
	if err != nil || !reflect.DeepEqual(gotb, blk) {
		t.Fatalf("round trip %s: %+v, %v", b, gotb, err)
	}
}

func TestSubject(t *testing.T) {
	if got := Subject(Prefix("rig2"), SubjectSpikes); got != "livefield.rig2.spikes" {
		t.Fatalf("Subject = %q", got)
	}
}

func TestReasonsDocumented(t *testing.T) {
	// Every reason appears in the package documentation table.
	doc, err := readDoc()
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range Reasons {
		if !strings.Contains(doc, "//\t"+r+" ") {
			t.Errorf("reason %q missing from the table in doc.go", r)
		}
	}
}

func TestSpikesToNoAlloc(t *testing.T) {
	msg := []byte(`{"unit":["12","12","7","3"],"t":[20.0031,20.0101,20.0113,21]}`)
	var d Decoder
	var s Spikes
	if err := d.SpikesTo(&s, msg); err != nil {
		t.Fatal(err)
	}
	if n := testing.AllocsPerRun(100, func() { _ = d.SpikesTo(&s, msg) }); n != 0 {
		t.Fatalf("SpikesTo allocates %v times per message in steady state", n)
	}
	fm := []byte(`{"block":"B1","index":[1200,1201],"t":[20.0,20.0167]}`)
	var f Frames
	_ = d.FramesTo(&f, fm)
	if n := testing.AllocsPerRun(100, func() { _ = d.FramesTo(&f, fm) }); n != 0 {
		t.Fatalf("FramesTo allocates %v times per message in steady state", n)
	}
}
