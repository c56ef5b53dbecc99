package wire_test

import (
	"errors"
	"fmt"

	"livefield/stream/wire"
)

// One message of each kind, as a rig publishes them, and one rejection.
func Example() {
	prefix := wire.Prefix("rig1")

	start, _ := wire.DecodeBlock([]byte(`{"kind":"start","block":"B1","t":12.5,"stimulus":{"type":"binary","width":16,"height":16,"seed":42,"contrast":1}}`))
	fmt.Println(wire.Subject(prefix, wire.SubjectBlock), start.Kind, start.Block, start.T, start.Lags, string(start.Stimulus))

	frames, _ := wire.DecodeFrames([]byte(`{"block":"B1","index":[1200,1201],"t":[20.0,20.0167]}`))
	fmt.Println(wire.Subject(prefix, wire.SubjectFrames), frames.Index, frames.T)

	spikes, _ := wire.DecodeSpikes([]byte(`{"unit":["12","12","7"],"t":[20.0031,20.0101,20.0113]}`))
	fmt.Println(wire.Subject(prefix, wire.SubjectSpikes), spikes.Unit, spikes.T)

	ctl, _ := wire.DecodeControl([]byte(`{"command":"flag_stc","unit":"12"}`))
	fmt.Println(wire.Subject(prefix, wire.SubjectControl), ctl.Command, ctl.Unit)

	end, _ := wire.DecodeBlock([]byte(`{"kind":"end","block":"B1","t":1812.5}`))
	fmt.Println(end.Kind, end.T)

	b, _ := wire.EncodeSpikes(wire.Spikes{Unit: []string{"ch07.1"}, T: []float64{20.5}})
	fmt.Println(string(b))

	_, err := wire.DecodeSpikes([]byte(`{"unit":["12","7"],"t":[20.01,20.0031]}`))
	var we *wire.Error
	if errors.As(err, &we) {
		fmt.Println(we.Reason)
	}
	fmt.Println(err)
	// Output:
	// livefield.rig1.block start B1 12.5 12 {"type":"binary","width":16,"height":16,"seed":42,"contrast":1}
	// livefield.rig1.frames [1200 1201] [20 20.0167]
	// livefield.rig1.spikes [12 12 7] [20.0031 20.0101 20.0113]
	// livefield.rig1.control flag_stc 12
	// end 1812.5
	// {"unit":["ch07.1"],"t":[20.5]}
	// time-order
	// wire: time-order: t[1]: 20.0031 after 20.01
}
