package display

import (
	"os"
	"reflect"
	"regexp"
	"slices"
	"strings"
	"testing"

	"livefield/online"
)

// jsonNames collects the JSON names of the fields of t, embedded structs
// included.
func jsonNames(t reflect.Type, into map[string]bool) {
	for i := range t.NumField() {
		f := t.Field(i)
		if f.Anonymous && f.Type.Kind() == reflect.Struct {
			jsonNames(f.Type, into)
			continue
		}
		name, _, _ := strings.Cut(f.Tag.Get("json"), ",")
		if name != "" && name != "-" {
			into[name] = true
		}
	}
}

// The page keeps its status words, the unit fields it reads by name and its
// densities in one file (web/js/words.js); they must be the server's.
func TestPageWordsMatchServer(t *testing.T) {
	js, err := os.ReadFile("web/js/words.js")
	if err != nil {
		t.Fatal(err)
	}
	block := func(name string) string {
		m := regexp.MustCompile(`(?s)export const ` + name + ` = [\[{](.*?)[\]}];`).FindSubmatch(js)
		if m == nil {
			t.Fatalf("words.js has no %s", name)
		}
		return string(m[1])
	}
	values := func(src string) []string {
		var out []string
		for _, m := range regexp.MustCompile(`:\s*'([^']*)'`).FindAllStringSubmatch(src, -1) {
			out = append(out, m[1])
		}
		return out
	}

	words := values(block("WORD"))
	want := []string{string(online.Collecting), string(online.Emerging), string(online.Reliable), string(online.NoField)}
	if !slices.Equal(words, want) {
		t.Errorf("words.js WORD %q, the server's states %q", words, want)
	}

	names := map[string]bool{}
	jsonNames(reflect.TypeOf(tileUnit{}), names)
	jsonNames(reflect.TypeOf(online.UnitDetail{}), names)
	fields := values(block("FIELD"))
	if len(fields) < 10 {
		t.Fatalf("words.js FIELD: only %d names found", len(fields))
	}
	for _, f := range fields {
		if !names[f] {
			t.Errorf("words.js FIELD names %q, which no unit the server sends has", f)
		}
	}

	var densities []string
	for _, m := range regexp.MustCompile(`key: '([^']*)'`).FindAllStringSubmatch(block("DENSITIES"), -1) {
		if _, ok := parseDensity(m[1]); ok {
			densities = append(densities, m[1])
		} else if m[1] != "auto" {
			t.Errorf("words.js density %q is not one the server knows", m[1])
		}
	}
	if !slices.Equal(densities, []string{string(Large), string(Medium), string(Compact)}) {
		t.Errorf("words.js densities %q, want large, medium, compact", densities)
	}

	// The estimates a status can come from: the tile shows the reliability
	// of the one named, so the names must be the server's.
	estimates := values(block("ESTIMATE"))
	if want := []string{online.EstimateRidge, online.EstimatePrior}; !slices.Equal(estimates, want) {
		t.Errorf("words.js ESTIMATE %q, the server's estimates %q", estimates, want)
	}
}
