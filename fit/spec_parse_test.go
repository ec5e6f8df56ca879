package fit

import (
	"bytes"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// updateSpecGolden rewrites testdata/spec/*/want.txt from what ParseSpec
// returns: go test ./fit/ -run TestParseSpecGolden -update
var updateSpecGolden = flag.Bool("update", false, "rewrite golden files")

// specGoldenDir holds one folder per case: model.yaml and want.txt, the
// exact error text or the parsed spec as JSON.
const specGoldenDir = "../testdata/spec"

func TestParseSpecGolden(t *testing.T) {
	dirs, err := filepath.Glob(filepath.Join(specGoldenDir, "*", "model.yaml"))
	if err != nil || len(dirs) == 0 {
		t.Fatalf("no golden cases in %s (err %v)", specGoldenDir, err)
	}
	for _, model := range dirs {
		dir := filepath.Dir(model)
		t.Run(filepath.Base(dir), func(t *testing.T) {
			data, err := os.ReadFile(model)
			if err != nil {
				t.Fatal(err)
			}
			got := goldenText(t, data)
			wantPath := filepath.Join(dir, "want.txt")
			if *updateSpecGolden {
				if err := os.WriteFile(wantPath, []byte(got), 0o644); err != nil {
					t.Fatal(err)
				}
			}
			want, err := os.ReadFile(wantPath)
			if err != nil {
				t.Fatalf("%v (run with -update to create it)", err)
			}
			if got != string(want) {
				t.Errorf("ParseSpec(%s) differs from want.txt (run with -update to accept)\ngot:\n%s\nwant:\n%s", model, got, want)
			}
			valid := strings.HasPrefix(filepath.Base(dir), "valid-")
			if valid != strings.HasPrefix(got, "{") {
				t.Errorf("case %s: a valid- case must parse and any other must not", dir)
			}
		})
	}
}

// goldenText is what want.txt holds for a spec: its error text, or its JSON.
func goldenText(t *testing.T, data []byte) string {
	t.Helper()
	s, err := ParseSpec(data)
	if err != nil {
		return err.Error() + "\n"
	}
	b, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		t.Fatal(err)
	}
	return string(b) + "\n"
}

// specHead starts a spec that needs only terms; lines 1 and 2.
const specHead = "name: m\nresponse: y\n"

// specErrorCases each hold a spec with one mistake and where it must be
// reported. They also seed FuzzParseSpec.
var specErrorCases = []struct {
	name string
	in   string
	line int
	path string
	// want are fragments of the problem's text; the key at fault is one.
	want []string
}{
	{"empty", "", 1, "", []string{"empty"}},
	{"comment only", "# nothing\n", 1, "", []string{"empty"}},
	{"not a mapping", "- a\n- b\n", 1, "", []string{"mapping", "not a list"}},
	{"syntax", specHead + "terms: [\n", 3, "", []string{"not valid YAML"}},
	{"two documents", specHead + "terms: [{linear: x}]\n---\nname: n\n", 4, "", []string{"second YAML document"}},
	{"unknown top key", specHead + "terms: [{linear: x}]\nfamly: poisson\n", 4, "", []string{`unknown key "famly"`, "family"}},
	{"duplicate key", specHead + "terms: [{linear: x}]\nresponse: z\n", 4, "", []string{`key "response" appears twice`, "line 2"}},
	{"merge key", specHead + "terms: [{linear: x}]\n<<: {family: poisson}\n", 4, "", []string{"merge keys"}},
	{"missing name", "response: y\nterms: [{linear: x}]\n", 1, "", []string{`missing key "name"`}},
	{"missing response", "name: m\nterms: [{linear: x}]\n", 1, "", []string{`missing key "response"`}},
	{"missing terms", specHead, 1, "", []string{`missing key "terms"`}},
	{"terms null", specHead + "terms:\n", 3, "", []string{"terms has no value"}},
	{"terms empty", specHead + "terms: []\n", 3, "", []string{"terms is empty"}},
	{"terms mapping", specHead + "terms: {curve: x}\n", 3, "", []string{"terms must be a list", "not a mapping"}},
	{"name blank", "name: ' '\nresponse: y\nterms: [{linear: x}]\n", 1, "", []string{"name is blank"}},
	{"name control", "name: \"a\\tb\"\nresponse: y\nterms: [{linear: x}]\n", 1, "", []string{"name", "control character"}},
	{"response list", "name: m\nresponse: [y]\nterms: [{linear: x}]\n", 2, "", []string{"response must be", "not a list"}},
	{"response bool", "name: m\nresponse: true\nterms: [{linear: x}]\n", 2, "", []string{"response must be", "not true"}},
	{"family unknown", specHead + "family: poison\nterms: [{linear: x}]\n", 3, "", []string{`family "poison" is not one of gaussian, poisson, binomial, gamma`}},
	{"family number", specHead + "family: 3\nterms: [{linear: x}]\n", 3, "", []string{"family must be one of", "not 3"}},
	{"family null", specHead + "family:\nterms: [{linear: x}]\n", 3, "", []string{"family has no value"}},
	{"link unknown", specHead + "link: probit\nterms: [{linear: x}]\n", 3, "", []string{`link "probit" is not one of`}},
	{"link family", specHead + "family: binomial\nlink: log\nterms: [{linear: x}]\n", 4, "", []string{`link "log" does not go with family binomial`, "use logit"}},
	{"link gaussian", specHead + "link: inverse\nterms: [{linear: x}]\n", 3, "", []string{`link "inverse"`, "gaussian", "identity, log"}},
	{"selection", specHead + "selection: aic\nterms: [{linear: x}]\n", 3, "", []string{`selection "aic" is not one of reml, gcv`}},
	{"weights response", specHead + "weights: y\nterms: [{linear: x}]\n", 3, "", []string{`weights "y" is the response column`}},
	{"offset response", specHead + "offset: y\nterms: [{linear: x}]\n", 3, "", []string{`offset "y" is the response column`}},
	{"offset weights", specHead + "weights: w\noffset: w\nterms: [{linear: x}]\n", 4, "", []string{`offset "w" is also the weights column`}},

	{"term not mapping", specHead + "terms:\n  - water_temp\n", 4, "terms[0]", []string{"a term must be a mapping", `"water_temp"`}},
	{"term no kind", specHead + "terms:\n  - basis: cubic\n", 4, "terms[0]", []string{"none of curve, linear, factor or surface"}},
	{"term two kinds", specHead + "terms:\n  - curve: x\n    linear: x\n", 5, "terms[0]", []string{"both curve and linear", "split"}},
	{"term unknown key", specHead + "terms:\n  - curve: x\n    smooth: 3\n", 5, "terms[0]", []string{`unknown key "smooth" (known keys for a curve: basis, size, knots, period, smoothing, by)`}},
	{"term unknown key surface", specHead + "terms:\n  - surface: [a, b]\n    colour: red\n", 5, "terms[0]", []string{`unknown key "colour" (known keys for a surface: basis, size, knots, period, smoothing)`}},
	{"term unknown key factor", specHead + "terms:\n  - factor: site\n    shrunk: true\n", 5, "terms[0]", []string{`unknown key "shrunk", did you mean "shrink"? (known keys for a factor: shrink)`}},
	{"term unknown key linear", specHead + "terms:\n  - linear: x\n    scale: 2\n", 5, "terms[0]", []string{`unknown key "scale"`, "no other keys"}},
	{"term duplicate key", specHead + "terms:\n  - curve: x\n    size: 5\n    size: 6\n", 6, "terms[0]", []string{`key "size" appears twice (first on line 5)`}},
	{"column null", specHead + "terms:\n  - linear:\n", 4, "terms[0]", []string{"linear has no value"}},
	{"column list", specHead + "terms:\n  - curve: [x]\n", 4, "terms[0]", []string{"curve must be a column name", "not a list"}},
	{"linear basis", specHead + "terms:\n  - linear: x\n    basis: cubic\n", 5, "terms[0]", []string{"basis applies only to curves and surfaces", "linear", "curve: x"}},
	{"factor size", specHead + "terms:\n  - factor: site\n    size: 4\n", 5, "terms[0]", []string{"size applies only to curves and surfaces", "factor"}},
	{"basis unknown", specHead + "terms:\n  - curve: x\n    basis: thin_plate\n", 5, "terms[0]", []string{`basis "thin_plate" is not one of cubic, pspline, cyclic`}},
	{"knots unknown", specHead + "terms:\n  - curve: x\n    knots: random\n", 5, "terms[0]", []string{`knots "random" is not one of quantile, even, all`}},
	{"size text", specHead + "terms:\n  - curve: x\n    size: \"10\"\n", 5, "terms[0]", []string{"size must be a number", `"10"`}},
	{"size fraction", specHead + "terms:\n  - curve: x\n    size: 7.5\n", 5, "terms[0]", []string{"size must be a whole number", "7.5"}},
	{"size huge", specHead + "terms:\n  - curve: x\n    size: 1e20\n", 5, "terms[0]", []string{"size 1e20 is out of range"}},
	{"size small cubic", specHead + "terms:\n  - curve: x\n    size: 2\n", 5, "terms[0]", []string{"size 2 is too small for a cubic curve: use at least 3"}},
	{"size small pspline", specHead + "terms:\n  - curve: x\n    basis: pspline\n    size: 3\n", 6, "terms[0]", []string{"size 3 is too small for a pspline curve: use at least 4"}},
	{"size small cyclic", specHead + "terms:\n  - curve: x\n    basis: cyclic\n    period: [0, 1]\n    size: 3\n", 7, "terms[0]", []string{"size 3 is too small for a cyclic curve: use at least 4"}},
	{"size large", specHead + "terms:\n  - curve: x\n    size: 501\n", 5, "terms[0]", []string{"size 501 is too large: use at most 500", "model matrix"}},
	{"size with knots all", specHead + "terms:\n  - curve: x\n    knots: all\n    size: 20\n", 6, "terms[0]", []string{"size conflicts with knots: all", "one knot at each distinct value"}},
	{"pspline quantile", specHead + "terms:\n  - curve: x\n    basis: pspline\n    knots: quantile\n", 6, "terms[0]", []string{"knots quantile does not suit a pspline curve", "evenly spaced"}},
	{"pspline all", specHead + "terms:\n  - curve: x\n    basis: pspline\n    knots: all\n", 6, "terms[0]", []string{"knots all does not suit a pspline curve"}},
	{"period without cyclic", specHead + "terms:\n  - curve: x\n    period: [0, 24]\n", 5, "terms[0]", []string{"period applies only to cyclic curves", "basis: cyclic"}},
	{"cyclic without period", specHead + "terms:\n  - curve: hour\n    basis: cyclic\n", 5, "terms[0]", []string{"cyclic curve needs period", "[0, 24]"}},
	{"period scalar", specHead + "terms:\n  - curve: x\n    basis: cyclic\n    period: 24\n", 6, "terms[0]", []string{"period must be two numbers", "not 24"}},
	{"period three", specHead + "terms:\n  - curve: x\n    basis: cyclic\n    period: [0, 12, 24]\n", 6, "terms[0]", []string{"period must be two numbers", "not a list"}},
	{"period decreasing", specHead + "terms:\n  - curve: x\n    basis: cyclic\n    period: [24, 0]\n", 6, "terms[0]", []string{"period [24, 0] must increase"}},
	{"period equal", specHead + "terms:\n  - curve: x\n    basis: cyclic\n    period: [1, 1]\n", 6, "terms[0]", []string{"period [1, 1] must increase"}},
	{"period infinite", specHead + "terms:\n  - curve: x\n    basis: cyclic\n    period: [0, .inf]\n", 6, "terms[0]", []string{"period[1] must be a finite number"}},
	{"period text", specHead + "terms:\n  - curve: x\n    basis: cyclic\n    period: [a, 2]\n", 6, "terms[0]", []string{"period[0] must be a number", `"a"`}},
	{"smoothing zero", specHead + "terms:\n  - curve: x\n    smoothing: 0\n", 5, "terms[0]", []string{"smoothing 0 must be positive"}},
	{"smoothing negative list", specHead + "terms:\n  - curve: x\n    smoothing: [-2]\n", 5, "terms[0]", []string{"smoothing[0] -2 must be positive"}},
	{"smoothing nan", specHead + "terms:\n  - curve: x\n    smoothing: .nan\n", 5, "terms[0]", []string{"smoothing must be a finite number"}},
	{"smoothing text", specHead + "terms:\n  - curve: x\n    smoothing: lots\n", 5, "terms[0]", []string{"smoothing must be a number", `"lots"`}},
	{"smoothing two on curve", specHead + "terms:\n  - curve: x\n    smoothing: [1, 2]\n", 5, "terms[0]", []string{"smoothing has 2 values but a curve has one penalty"}},
	{"smoothing empty", specHead + "terms:\n  - curve: x\n    smoothing: []\n", 5, "terms[0]", []string{"smoothing is an empty list"}},
	{"smoothing three on surface", specHead + "terms:\n  - surface: [a, b]\n    smoothing: [1, 2, 3]\n", 5, "terms[0]", []string{"smoothing has 3 values but a surface has 2 penalties"}},
	{"surface scalar", specHead + "terms:\n  - surface: a\n", 4, "terms[0]", []string{"surface must be a list of two columns", `"a"`}},
	{"surface one", specHead + "terms:\n  - surface: [a]\n", 4, "terms[0]", []string{"surface has 1 columns", "exactly two"}},
	{"surface same column", specHead + "terms:\n  - surface: [a, a]\n", 4, "terms[0]", []string{"surface [a, a] names one column twice"}},
	{"surface cyclic without period", specHead + "terms:\n  - surface: [a, b]\n    basis: cyclic\n", 5, "terms[0]", []string{"a surface with a cyclic margin needs period", "period: [[0, 24], [0, 24]]"}},
	{"surface knots all", specHead + "terms:\n  - surface: [a, b]\n    knots: all\n", 5, "terms[0]", []string{"knots all is for curves only"}},
	{"surface pspline quantile", specHead + "terms:\n  - surface: [a, b]\n    knots: quantile\n", 5, "terms[0]", []string{"knots quantile does not suit a pspline surface"}},
	{"surface period", specHead + "terms:\n  - surface: [a, b]\n    period: [0, 1]\n", 5, "terms[0]", []string{"period applies only to cyclic margins", "neither margin of this surface", "basis: [cyclic, pspline]"}},
	{"surface size small", specHead + "terms:\n  - surface: [a, b]\n    basis: cubic\n    size: [3, 2]\n", 6, "terms[0]", []string{"size[1] 2 is too small for a cubic surface margin: use at least 3"}},
	{"surface size small pspline", specHead + "terms:\n  - surface: [a, b]\n    size: 3\n", 5, "terms[0]", []string{"size 3 is too small for a pspline surface margin: use at least 4"}},
	{"surface size three", specHead + "terms:\n  - surface: [a, b]\n    size: [4, 4, 4]\n", 5, "terms[0]", []string{"size must be a whole number or a list of two", "not a list"}},
	{"surface size product", specHead + "terms:\n  - surface: [a, b]\n    size: [25, 21]\n", 5, "terms[0]", []string{"size [25, 21] gives 525 coefficients, more than 500"}},
	{"duplicate term", specHead + "terms:\n  - curve: x\n  - curve: x\n", 5, "terms[1]", []string{"duplicate of terms[0] (curve x)"}},
	{"alias term", specHead + "terms:\n  - &t {curve: x}\n  - *t\n", 5, "terms[1]", []string{"duplicate of terms[0] (an alias of the same term)"}},
	{"duplicate surface", specHead + "terms:\n  - surface: [a, b]\n  - surface: [b, a]\n", 5, "terms[1]", []string{"duplicate of terms[0] (surface a,b)"}},
	{"term on response", specHead + "terms:\n  - curve: y\n", 4, "terms[0]", []string{`curve "y" is the response column`}},
	{"term on weights", specHead + "weights: w\nterms:\n  - linear: w\n", 5, "terms[0]", []string{`linear "w" is the weights column`}},
	{"term on offset", specHead + "offset: o\nterms:\n  - surface: [a, o]\n", 5, "terms[0]", []string{`surface "o" is the offset column`}},
	{"curve and linear", specHead + "terms:\n  - curve: x\n  - linear: x\n", 5, "terms[1]", []string{`column "x" is in terms[0] (curve) and in this linear`, "already contains the straight line"}},
	{"linear and curve", specHead + "terms:\n  - linear: x\n  - surface: [x, z]\n  - curve: x\n", 6, "terms[2]", []string{`column "x" is in terms[0] (linear) and in this curve`, "pick one"}},
	{"curve and factor", specHead + "terms:\n  - curve: x\n  - factor: x\n", 5, "terms[1]", []string{`column "x" is in terms[0] (curve) and in this factor`, "categories"}},
	{"factor and surface", specHead + "terms:\n  - factor: x\n  - surface: [z, x]\n", 5, "terms[1]", []string{`column "x" is in terms[0] (factor) and in this surface`}},

	{"curve by null", specHead + "terms:\n  - curve: x\n    by:\n", 5, "terms[0]", []string{"by has no value", "factor column"}},
	{"curve by list", specHead + "terms:\n  - curve: x\n    by: [site, depth]\n", 5, "terms[0]", []string{"by must be a factor column", "not a list"}},
	{"curve by own column", specHead + "terms:\n  - curve: x\n    size: 5\n    by: x\n", 6, "terms[0]", []string{`by "x" is the curve's own column`, "by: site"}},
	{"curve by response", specHead + "terms:\n  - curve: x\n    by: y\n", 5, "terms[0]", []string{`by "y" is the response column`, "use a factor column for by"}},
	{"curve by weights", specHead + "weights: w\nterms:\n  - curve: x\n    by: w\n", 6, "terms[0]", []string{`by "w" is the weights column`}},
	{"curve by offset", specHead + "offset: o\nterms:\n  - curve: x\n    by: o\n", 6, "terms[0]", []string{`by "o" is the offset column`}},
	{"curve by a curve column", specHead + "terms:\n  - curve: z\n  - curve: x\n    by: z\n", 6, "terms[1]", []string{`by column "z" is in terms[0] (curve)`, "read as categories"}},
	{"linear on a by column", specHead + "terms:\n  - curve: x\n    by: site\n  - linear: site\n", 6, "terms[1]", []string{`column "site" is the by column of terms[0] and in this linear`}},
	{"surface on a by column", specHead + "terms:\n  - curve: x\n    by: site\n  - surface: [z, site]\n", 6, "terms[1]", []string{`column "site" is the by column of terms[0] and in this surface`}},
	{"curve plain and by", specHead + "terms:\n  - curve: x\n  - curve: x\n    by: site\n", 5, "terms[1]", []string{`terms[0] is already a curve of "x"`, "plain or with by"}},
	{"linear by", specHead + "terms:\n  - linear: x\n    by: site\n", 5, "terms[0]", []string{"by applies only to curves, not to a linear term", "curve: x with by"}},
	{"factor by", specHead + "terms:\n  - factor: site\n    by: zone\n", 5, "terms[0]", []string{"by applies only to curves, not to a factor term"}},
	{"surface by", specHead + "terms:\n  - surface: [a, b]\n    by: site\n", 5, "terms[0]", []string{"by applies only to curves, not to a surface"}},
	{"factor shrink text", specHead + "terms:\n  - factor: site\n    shrink: yes\n", 5, "terms[0]", []string{"shrink must be true or false", `the text "yes"`}},
	{"factor shrink null", specHead + "terms:\n  - factor: site\n    shrink:\n", 5, "terms[0]", []string{"shrink has no value: give true or false"}},
	{"curve shrink", specHead + "terms:\n  - curve: x\n    shrink: true\n", 5, "terms[0]", []string{"shrink applies only to factor terms", "curve"}},
	{"linear shrink", specHead + "terms:\n  - linear: x\n    shrink: true\n", 5, "terms[0]", []string{"shrink applies only to factor terms", "factor: x"}},
	{"surface shrink", specHead + "terms:\n  - surface: [a, b]\n    shrink: true\n", 5, "terms[0]", []string{"shrink applies only to factor terms", "surface"}},
	{"factor size with shrink", specHead + "terms:\n  - factor: site\n    shrink: true\n    size: 4\n", 6, "terms[0]", []string{"size applies only to curves and surfaces"}},

	{"surface bases three", specHead + "terms:\n  - surface: [a, b]\n    basis: [cubic, cubic, cubic]\n", 5, "terms[0]", []string{"basis must be one name for both margins or a list of two", "not a list"}},
	{"surface bases mapping", specHead + "terms:\n  - surface: [a, b]\n    basis: {a: cubic}\n", 5, "terms[0]", []string{"basis must be one name for both margins or a list of two", "not a mapping"}},
	{"surface bases unknown", specHead + "terms:\n  - surface: [a, b]\n    basis: [cubic, thin_plate]\n", 5, "terms[0]", []string{`basis[1] "thin_plate" is not one of cubic, pspline, cyclic`}},
	{"surface bases null entry", specHead + "terms:\n  - surface: [a, b]\n    basis: [cubic, null]\n", 5, "terms[0]", []string{"basis[1] has no value: use one of cubic, pspline, cyclic"}},
	{"surface cyclic margin without period", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, pspline]\n", 5, "terms[0]", []string{"a surface with a cyclic margin needs period", "e.g. period: [[0, 24], null]"}},
	{"surface period one margin form", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, pspline]\n    period: [0, 24]\n", 6, "terms[0]", []string{"period [0, 24] is the period of one margin", "e.g. [[0, 24], null]"}},
	{"surface period three", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, pspline]\n    period: [[0, 24], null, null]\n", 6, "terms[0]", []string{"period on a surface must be a list of two entries", "not a list"}},
	{"surface period scalar", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, pspline]\n    period: 24\n", 6, "terms[0]", []string{"period on a surface must be a list of two entries", "not 24"}},
	{"surface period on non-cyclic margin", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, pspline]\n    period: [[0, 24], [0, 10]]\n", 6, "terms[0]", []string{"period[1] is given but margin 1 (flow) is pspline, not cyclic", "write null"}},
	{"surface period missing for cyclic margin", specHead + "terms:\n  - surface: [flow, hour]\n    basis: [pspline, cyclic]\n    period: [null, null]\n", 6, "terms[0]", []string{"period[1] is empty but margin 1 (hour) is cyclic", "[0, 24]"}},
	{"surface period decreasing", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, cubic]\n    period: [[24, 0], ~]\n", 6, "terms[0]", []string{"period[0] [24, 0] must increase"}},
	{"surface period text", specHead + "terms:\n  - surface: [hour, day]\n    basis: cyclic\n    period: [[0, 24], [1, end]]\n", 6, "terms[0]", []string{"period[1][1] must be a number", `"end"`}},
	{"surface period entry scalar", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, cubic]\n    period: [24, null]\n", 6, "terms[0]", []string{"period[0] must be two numbers [start, end]", "not 24"}},
	{"surface cyclic margin small", specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, cubic]\n    period: [[0, 24], null]\n    size: [3, 3]\n", 7, "terms[0]", []string{"size[0] 3 is too small for a cyclic surface margin: use at least 4"}},
	{"surface one size mixed", specHead + "terms:\n  - surface: [a, b]\n    basis: [cubic, pspline]\n    size: 3\n", 6, "terms[0]", []string{"size 3 is too small for a pspline surface margin: use at least 4"}},
	{"surface mixed quantile", specHead + "terms:\n  - surface: [a, b]\n    basis: [cubic, pspline]\n    knots: quantile\n", 6, "terms[0]", []string{"knots quantile does not suit the pspline margin of this surface", "knots applies to both margins"}},

	{"serial null", specHead + "terms: [{linear: x}]\nserial:\n", 4, "", []string{"serial has no value", "order"}},
	{"serial list", specHead + "terms: [{linear: x}]\nserial: [t]\n", 4, "", []string{"serial must be a mapping of keys (order, rho, gap)", "not a list"}},
	{"serial unknown key", specHead + "terms: [{linear: x}]\nserial:\n  order: t\n  lag: 1\n", 6, "serial", []string{`unknown key "lag" (known keys: order, rho, gap)`}},
	{"serial missing order", specHead + "terms: [{linear: x}]\nserial: {rho: 0.5}\n", 4, "serial", []string{`missing key "order"`, "order: hours_since_start"}},
	{"serial order list", specHead + "terms: [{linear: x}]\nserial: {order: [t]}\n", 4, "serial", []string{"order must be the numeric column giving time", "not a list"}},
	{"serial rho one", specHead + "terms: [{linear: x}]\nserial: {order: t, rho: 1}\n", 4, "serial", []string{"rho 1 must be strictly between -1 and 1", "estimate"}},
	{"serial rho minus one", specHead + "terms: [{linear: x}]\nserial: {order: t, rho: -1.0}\n", 4, "serial", []string{"rho -1.0 must be strictly between -1 and 1"}},
	{"serial rho word", specHead + "terms: [{linear: x}]\nserial: {order: t, rho: estimated}\n", 4, "serial", []string{`rho "estimated" is neither a number nor the word estimate`}},
	{"serial rho null", specHead + "terms: [{linear: x}]\nserial: {order: t, rho: }\n", 4, "serial", []string{"rho has no value", "estimate"}},
	{"serial rho bool", specHead + "terms: [{linear: x}]\nserial: {order: t, rho: true}\n", 4, "serial", []string{"rho must be a number strictly between -1 and 1", "or the word estimate", "not true"}},
	{"serial rho nan", specHead + "terms: [{linear: x}]\nserial: {order: t, rho: .nan}\n", 4, "serial", []string{"rho must be a finite number"}},
	{"serial gap zero", specHead + "terms: [{linear: x}]\nserial: {order: t, gap: 0}\n", 4, "serial", []string{"gap 0 must be above 0", "remove gap"}},
	{"serial gap text", specHead + "terms: [{linear: x}]\nserial: {order: t, gap: 1h}\n", 4, "serial", []string{"gap must be a number", `"1h"`}},
	{"serial poisson", specHead + "family: poisson\nterms: [{linear: x}]\nserial: {order: t}\n", 5, "", []string{"serial (AR(1) errors) needs family gaussian with link identity, not family poisson with link log"}},
	{"serial gaussian log", specHead + "link: log\nterms: [{linear: x}]\nserial: {order: t}\n", 5, "", []string{"needs family gaussian with link identity", "link log"}},
	{"serial order response", specHead + "terms: [{linear: x}]\nserial:\n  order: y\n", 5, "serial", []string{`order "y" is the response column`}},
	{"serial order weights", specHead + "weights: w\nterms: [{linear: x}]\nserial:\n  order: w\n", 6, "serial", []string{`order "w" is the weights column`}},
	{"serial order factor", specHead + "terms: [{factor: t}]\nserial:\n  order: t\n", 5, "serial", []string{`order "t" is the column of the factor in terms[0]`, "numeric"}},
	{"serial order by", specHead + "terms: [{curve: x, by: t}]\nserial:\n  rho: 0.3\n  order: t\n", 6, "serial", []string{`order "t" is the by column of terms[0]`}},

	{"watch list", specHead + "terms: [{linear: x}]\nwatch: [a]\n", 4, "", []string{"watch must be a mapping", "not a list"}},
	{"watch null", specHead + "terms: [{linear: x}]\nwatch:\n", 4, "", []string{"watch must be a mapping", "an empty value"}},
	{"watch unknown key", specHead + "terms: [{linear: x}]\nwatch:\n  levle: 0.9\n", 5, "watch", []string{`unknown key "levle" (known keys: against, practical_shift, level, deviance_increase, confirm_runs)`}},
	{"watch against", specHead + "terms: [{linear: x}]\nwatch: {against: last}\n", 4, "watch", []string{`against "last" is not one of baseline, previous`}},
	{"watch shift zero", specHead + "terms: [{linear: x}]\nwatch: {practical_shift: 0}\n", 4, "watch", []string{"practical_shift 0 must be above 0"}},
	{"watch shift text", specHead + "terms: [{linear: x}]\nwatch: {practical_shift: big}\n", 4, "watch", []string{"practical_shift must be a number", `"big"`}},
	{"watch level one", specHead + "terms: [{linear: x}]\nwatch: {level: 1}\n", 4, "watch", []string{"level 1 must be between 0 and 1"}},
	{"watch level negative", specHead + "terms: [{linear: x}]\nwatch: {level: -0.5}\n", 4, "watch", []string{"level -0.5 must be between 0 and 1"}},
	{"watch deviance", specHead + "terms: [{linear: x}]\nwatch: {deviance_increase: -1}\n", 4, "watch", []string{"deviance_increase -1 must be above 0"}},
	{"watch runs zero", specHead + "terms: [{linear: x}]\nwatch: {confirm_runs: 0}\n", 4, "watch", []string{"confirm_runs 0 must be at least 1"}},
	{"watch runs fraction", specHead + "terms: [{linear: x}]\nwatch: {confirm_runs: 1.5}\n", 4, "watch", []string{"confirm_runs must be a whole number"}},
}

func TestParseSpecErrors(t *testing.T) {
	for _, tc := range specErrorCases {
		t.Run(tc.name, func(t *testing.T) {
			s, err := ParseSpec([]byte(tc.in))
			if err == nil {
				t.Fatalf("ParseSpec accepted %q: %+v", tc.in, s)
			}
			if s != nil {
				t.Errorf("ParseSpec returned a spec with its error")
			}
			var se *SpecError
			if !errors.As(err, &se) {
				t.Fatalf("error %T is not a *SpecError: %v", err, err)
			}
			if len(se.Problems) != 1 {
				t.Errorf("want exactly one problem, got %d:\n%v", len(se.Problems), err)
			}
			p := se.Problems[0]
			if p.Line != tc.line || p.Path != tc.path {
				t.Errorf("problem at line %d, path %q; want line %d, path %q: %s", p.Line, p.Path, tc.line, tc.path, p)
			}
			text := p.String()
			if prefix := fmt.Sprintf("line %d: ", tc.line); !strings.HasPrefix(text, prefix) {
				t.Errorf("%q does not start with %q", text, prefix)
			}
			for _, w := range tc.want {
				if !strings.Contains(text, w) {
					t.Errorf("%q does not contain %q", text, w)
				}
			}
		})
	}
}

func TestParseSpecCollectsEveryProblem(t *testing.T) {
	in := specHead + `family: poison
terms:
  - curve: x
    size: 2
  - curve: x
    smooth: 3
watch:
  level: 2
`
	_, err := ParseSpec([]byte(in))
	var se *SpecError
	if !errors.As(err, &se) {
		t.Fatalf("want a *SpecError, got %v", err)
	}
	wantLines := []int{3, 6, 7, 8, 10}
	var gotLines []int
	for _, p := range se.Problems {
		gotLines = append(gotLines, p.Line)
	}
	if !reflect.DeepEqual(gotLines, wantLines) {
		t.Errorf("problems on lines %v, want %v:\n%v", gotLines, wantLines, err)
	}
	if n := strings.Count(err.Error(), "\n"); n != len(wantLines)-1 {
		t.Errorf("Error() has %d line breaks, want one problem per line:\n%s", n, err)
	}
}

// TestParseSpecAliasBomb checks that aliases cannot multiply the work: a
// term written once and repeated by alias is read once.
func TestParseSpecAliasBomb(t *testing.T) {
	var b strings.Builder
	b.WriteString(specHead + "big: &big {curve: x")
	for i := range 2000 {
		fmt.Fprintf(&b, ", k%d: 1", i)
	}
	b.WriteString("}\nterms: [")
	for i := range 2000 {
		if i > 0 {
			b.WriteString(", ")
		}
		b.WriteString("*big")
	}
	b.WriteString("]\n")
	_, err := ParseSpec([]byte(b.String()))
	var se *SpecError
	if !errors.As(err, &se) {
		t.Fatalf("want a *SpecError, got %v", err)
	}
	// "big" is unknown, its 2000 keys once, then 1999 duplicates.
	if n := len(se.Problems); n != 1+2000+1999 {
		t.Errorf("%d problems, want %d", n, 1+2000+1999)
	}
}

func TestParseSpecDefaults(t *testing.T) {
	tests := []struct {
		name string
		in   string
		want Spec
	}{{
		name: "gaussian curve",
		in:   specHead + "terms: [{curve: x}]\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Curve, Columns: []string{"x"}, Basis: Cubic, Size: []int{10}, Knots: QuantileKnots},
		}},
	}, {
		name: "poisson pspline cyclic",
		in:   specHead + "family: poisson\nselection: gcv\nterms:\n  - curve: x\n    basis: pspline\n  - curve: h\n    basis: cyclic\n    period: [0, 24]\n",
		want: Spec{Name: "m", Response: "y", Family: Poisson, Link: Log, Selection: GCV, Terms: []TermSpec{
			{Kind: Curve, Columns: []string{"x"}, Basis: PSpline, Size: []int{10}, Knots: EvenKnots},
			{Kind: Curve, Columns: []string{"h"}, Basis: Cyclic, Size: []int{10}, Knots: EvenKnots, Period: []float64{0, 24}},
		}},
	}, {
		name: "binomial knots all",
		in:   specHead + "family: binomial\nweights: n\nterms:\n  - curve: x\n    knots: all\n    smoothing: 12.5\n  - linear: z\n  - factor: site\n",
		want: Spec{Name: "m", Response: "y", Family: Binomial, Link: Logit, Weights: "n", Selection: REML, Terms: []TermSpec{
			{Kind: Curve, Columns: []string{"x"}, Basis: Cubic, Size: []int{0}, Knots: AllKnots, Smoothing: []float64{12.5}},
			{Kind: Linear, Columns: []string{"z"}},
			{Kind: Factor, Columns: []string{"site"}},
		}},
	}, {
		name: "gamma surface",
		in:   specHead + "family: gamma\nlink: inverse\nterms:\n  - surface: [a, b]\n    smoothing: 3\n  - surface: [c, d]\n    basis: cubic\n    size: 4\n    smoothing: [1, 2.5]\n",
		want: Spec{Name: "m", Response: "y", Family: Gamma, Link: Inverse, Selection: REML, Terms: []TermSpec{
			{Kind: Surface, Columns: []string{"a", "b"}, Basis: PSpline, Bases: []Basis{PSpline, PSpline}, Size: []int{5, 5}, Knots: EvenKnots, Smoothing: []float64{3, 3}},
			{Kind: Surface, Columns: []string{"c", "d"}, Basis: Cubic, Bases: []Basis{Cubic, Cubic}, Size: []int{4, 4}, Knots: QuantileKnots, Smoothing: []float64{1, 2.5}},
		}},
	}, {
		name: "numbers as written",
		in:   "name: 2024\nresponse: '007'\nterms:\n  - curve: 1.5\n    size: 12.0\n    smoothing: 0x10\n",
		want: Spec{Name: "2024", Response: "007", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Curve, Columns: []string{"1.5"}, Basis: Cubic, Size: []int{12}, Knots: QuantileKnots, Smoothing: []float64{16}},
		}},
	}, {
		name: "anchors and watch",
		in:   specHead + "terms:\n  - curve: a\n    size: &k 7\n  - curve: b\n    size: *k\nwatch: {against: previous, practical_shift: 1, level: 0.95, deviance_increase: 0.2, confirm_runs: 3}\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Curve, Columns: []string{"a"}, Basis: Cubic, Size: []int{7}, Knots: QuantileKnots},
			{Kind: Curve, Columns: []string{"b"}, Basis: Cubic, Size: []int{7}, Knots: QuantileKnots},
		}, Watch: map[string]any{"against": "previous", "practical_shift": 1.0, "level": 0.95, "deviance_increase": 0.2, "confirm_runs": 3}},
	}, {
		name: "by and shrink",
		in:   specHead + "terms:\n  - curve: x\n    by: site\n    smoothing: 2\n  - curve: z\n    by: site\n  - factor: site\n    shrink: true\n  - factor: zone\n    shrink: false\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Curve, Columns: []string{"x"}, Basis: Cubic, Size: []int{10}, Knots: QuantileKnots, Smoothing: []float64{2}, By: "site"},
			{Kind: Curve, Columns: []string{"z"}, Basis: Cubic, Size: []int{10}, Knots: QuantileKnots, By: "site"},
			{Kind: Factor, Columns: []string{"site"}, Shrink: true},
			{Kind: Factor, Columns: []string{"zone"}},
		}},
	}, {
		name: "surface margins",
		in: specHead + "terms:\n  - surface: [hour, flow]\n    basis: [cyclic, pspline]\n    period: [[0, 24], null]\n" +
			"  - surface: [hour, day]\n    basis: cyclic\n    knots: quantile\n    size: [6, 4]\n    period:\n      - [0, 24]\n      - [1, 366]\n" +
			"  - surface: [a, b]\n    basis: [cubic, cubic]\n  - surface: [c, hour]\n    basis: [cubic, cyclic]\n    period: [~, [0, 24]]\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Surface, Columns: []string{"hour", "flow"}, Size: []int{5, 5}, Knots: EvenKnots,
				Bases: []Basis{Cyclic, PSpline}, Periods: [][]float64{{0, 24}, nil}},
			{Kind: Surface, Columns: []string{"hour", "day"}, Basis: Cyclic, Size: []int{6, 4}, Knots: QuantileKnots,
				Bases: []Basis{Cyclic, Cyclic}, Periods: [][]float64{{0, 24}, {1, 366}}},
			{Kind: Surface, Columns: []string{"a", "b"}, Basis: Cubic, Size: []int{5, 5}, Knots: QuantileKnots, Bases: []Basis{Cubic, Cubic}},
			{Kind: Surface, Columns: []string{"c", "hour"}, Size: []int{5, 5}, Knots: EvenKnots,
				Bases: []Basis{Cubic, Cyclic}, Periods: [][]float64{nil, {0, 24}}},
		}},
	}, {
		name: "serial estimated by default",
		in:   specHead + "terms: [{curve: t}]\nserial: {order: t}\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Curve, Columns: []string{"t"}, Basis: Cubic, Size: []int{10}, Knots: QuantileKnots},
		}, Serial: &SerialSpec{Order: "t", Estimate: true}},
	}, {
		name: "serial fixed with gap",
		in:   specHead + "terms: [{linear: x}]\nserial:\n  order: hours_since_start\n  rho: -0.25\n  gap: 1.5\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Linear, Columns: []string{"x"}},
		}, Serial: &SerialSpec{Order: "hours_since_start", Rho: -0.25, Gap: 1.5}},
	}, {
		name: "serial rho estimate",
		in:   specHead + "terms: [{linear: x}]\nserial: {order: t, rho: estimate, gap: 2}\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Linear, Columns: []string{"x"}},
		}, Serial: &SerialSpec{Order: "t", Estimate: true, Gap: 2}},
	}, {
		name: "trailing empty document",
		in:   specHead + "terms: [{linear: x}]\n---\n",
		want: Spec{Name: "m", Response: "y", Family: Gaussian, Link: Identity, Selection: REML, Terms: []TermSpec{
			{Kind: Linear, Columns: []string{"x"}},
		}},
	}}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParseSpec([]byte(tc.in))
			if err != nil {
				t.Fatal(err)
			}
			forgetLines(got)
			if !reflect.DeepEqual(*got, tc.want) {
				t.Errorf("got  %+v\nwant %+v", *got, tc.want)
			}
		})
	}
}

// forgetLines clears the line numbers a parsed spec carries.
func forgetLines(s *Spec) {
	s.Lines = nil
	for i := range s.Terms {
		s.Terms[i].Line = 0
	}
}

func TestParseSpecLines(t *testing.T) {
	s, err := ParseSpec([]byte("name: m\n\nresponse: y\nterms:\n  - linear: x\n\n  - curve: z\nserial:\n  rho: 0.5\n  order: t\n"))
	if err != nil {
		t.Fatal(err)
	}
	if s.Lines["response"] != 3 || s.Terms[0].Line != 5 || s.Terms[1].Line != 7 || s.Lines["serial.order"] != 10 {
		t.Errorf("lines %v, terms on %d and %d; want response 3, terms 5 and 7, serial.order 10", s.Lines, s.Terms[0].Line, s.Terms[1].Line)
	}
}

func TestCheckColumns(t *testing.T) {
	s, err := ParseSpec([]byte("name: m\nresponse: dissolved_oxygen\nweights: quality\nterms:\n  - curve: Water_Temp\n  - surface: [water_temp, flw]\n  - factor: site\n  - linear: turbidity\n"))
	if err != nil {
		t.Fatal(err)
	}
	data := []string{"observed_at", "dissolved_oxygen", "water_temp", "flow", "site", "conductivity"}
	err = s.CheckColumns(data)
	want := strings.Join([]string{
		`line 3: weights column "quality" is not in the data (it has "observed_at", "dissolved_oxygen", "water_temp", "flow", "site", "conductivity")`,
		`line 5: terms[0]: curve column "Water_Temp" is not in the data: did you mean "water_temp"?`,
		`line 6: terms[1]: surface column "flw" is not in the data: did you mean "flow"?`,
		`line 8: terms[3]: linear column "turbidity" is not in the data (it has "observed_at", "dissolved_oxygen", "water_temp", "flow", "site", "conductivity")`,
	}, "\n")
	if err == nil || err.Error() != want {
		t.Errorf("CheckColumns:\n%v\nwant:\n%s", err, want)
	}
	if err := s.CheckColumns(append(data, "quality", "Water_Temp", "flw", "turbidity")); err != nil {
		t.Errorf("CheckColumns with every column: %v", err)
	}
}

func TestCheckColumnsManyAndNone(t *testing.T) {
	s := &Spec{Response: "y", Terms: []TermSpec{{Kind: Linear, Columns: []string{"x"}}, {Kind: Curve, Columns: []string{"x"}}}}
	err := s.CheckColumns(nil)
	want := `response column "y" is not in the data (the data have no columns)` + "\n" +
		`terms[0]: linear column "x" is not in the data (the data have no columns)`
	if err == nil || err.Error() != want {
		t.Errorf("CheckColumns(nil):\n%v\nwant (each column once, no line numbers):\n%s", err, want)
	}
	var cols []string
	for i := range 10 {
		cols = append(cols, fmt.Sprintf("column_%02d", i))
	}
	err = s.CheckColumns(cols)
	if err == nil || !strings.Contains(err.Error(), `"column_07", and 2 more)`) {
		t.Errorf("CheckColumns with 10 columns: %v", err)
	}
}

// TestCheckColumnsByAndOrder checks that a curve's by column and the serial
// order column are looked for too.
func TestCheckColumnsByAndOrder(t *testing.T) {
	s, err := ParseSpec([]byte(specHead + "terms:\n  - curve: x\n    by: Site\nserial:\n  rho: 0.5\n  order: hours\n"))
	if err != nil {
		t.Fatal(err)
	}
	err = s.CheckColumns([]string{"y", "x", "site", "hour"})
	want := `line 4: terms[0]: by column "Site" is not in the data: did you mean "site"?` + "\n" +
		`line 8: serial: serial order column "hours" is not in the data: did you mean "hour"?`
	if err == nil || err.Error() != want {
		t.Errorf("CheckColumns:\n%v\nwant:\n%s", err, want)
	}
}

func TestSpecColumns(t *testing.T) {
	s, err := ParseSpec([]byte(specHead + "weights: w\noffset: o\nterms:\n  - curve: a\n  - factor: site\n  - surface: [b, a]\n  - linear: c\n  - factor: season\n"))
	if err != nil {
		t.Fatal(err)
	}
	numeric, text := s.Columns()
	if want := []string{"y", "w", "o", "a", "b", "c"}; !reflect.DeepEqual(numeric, want) {
		t.Errorf("numeric %v, want %v", numeric, want)
	}
	if want := []string{"site", "season"}; !reflect.DeepEqual(text, want) {
		t.Errorf("text %v, want %v", text, want)
	}

	// A by column is text, also when a factor uses it; the serial order is a
	// number, also when a curve uses it.
	s, err = ParseSpec([]byte(specHead + "terms:\n  - curve: a\n    by: site\n  - curve: t\n    by: depth_band\n  - factor: site\n    shrink: true\nserial: {order: t}\n"))
	if err != nil {
		t.Fatal(err)
	}
	numeric, text = s.Columns()
	if want := []string{"y", "a", "t"}; !reflect.DeepEqual(numeric, want) {
		t.Errorf("numeric %v, want %v", numeric, want)
	}
	if want := []string{"site", "depth_band"}; !reflect.DeepEqual(text, want) {
		t.Errorf("text %v, want %v", text, want)
	}
	s.Serial.Order = "hours_since_start"
	if numeric, _ = s.Columns(); numeric[len(numeric)-1] != "hours_since_start" {
		t.Errorf("numeric %v does not end with the serial order", numeric)
	}
}

func TestEditDistance(t *testing.T) {
	// Values worked by hand from the Levenshtein recurrence (Levenshtein 1966).
	tests := []struct {
		a, b string
		want int
	}{
		{"", "", 0},
		{"", "abc", 3},
		{"kitten", "sitting", 3},
		{"flw", "flow", 1},
		{"water_tmp", "water_temp", 1},
		{"débit", "debit", 1},
		{strings.Repeat("a", 65), "a", 67},
	}
	for _, tc := range tests {
		if got := editDistance(tc.a, tc.b); got != tc.want {
			t.Errorf("editDistance(%q, %q) = %d, want %d", tc.a, tc.b, got, tc.want)
		}
	}
}

func TestSpecErrorString(t *testing.T) {
	e := &SpecError{Problems: []SpecProblem{
		{Line: 4, Message: `family "poison" is not one of gaussian, poisson, binomial, gamma`},
		{Line: 12, Path: "terms[2]", Message: `unknown key "smooth"`},
		{Path: "watch", Message: "no line"},
	}}
	want := "line 4: family \"poison\" is not one of gaussian, poisson, binomial, gamma\nline 12: terms[2]: unknown key \"smooth\"\nwatch: no line"
	if e.Error() != want {
		t.Errorf("Error() = %q, want %q", e.Error(), want)
	}
	if (&SpecError{}).Error() == "" {
		t.Error("an empty SpecError has no text")
	}
}

func TestBasisMinSize(t *testing.T) {
	for b, want := range map[Basis]int{Cubic: 3, PSpline: 4, Cyclic: 4, "thin_plate": 0} {
		if got := b.MinSize(); got != want {
			t.Errorf("%s.MinSize() = %d, want %d", b, got, want)
		}
	}
}

func ExampleParseSpec() {
	_, err := ParseSpec([]byte(`name: sonde-07-oxygen
response: dissolved_oxygen
family: poison
terms:
  - curve: water_temp
    size: 2
  - curve: hour
    basis: cyclic
`))
	fmt.Println(err)
	// Output:
	// line 3: family "poison" is not one of gaussian, poisson, binomial, gamma
	// line 6: terms[0]: size 2 is too small for a cubic curve: use at least 3
	// line 8: terms[1]: a cyclic curve needs period: [start, end], the range whose ends join, e.g. period: [0, 24] for hour of day
}

// readSpecGoldens returns the model.yaml of every golden case.
func readSpecGoldens(tb testing.TB) [][]byte {
	tb.Helper()
	paths, err := filepath.Glob(filepath.Join(specGoldenDir, "*", "model.yaml"))
	if err != nil {
		tb.Fatal(err)
	}
	var out [][]byte
	for _, p := range paths {
		data, err := os.ReadFile(p)
		if err != nil {
			tb.Fatal(err)
		}
		out = append(out, bytes.Clone(data))
	}
	return out
}
