package config

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"

	"go.yaml.in/yaml/v3"

	"github.com/curvewatch/curvewatch/fit"
)

// maxSpecNodes bounds the YAML nodes of an inline spec once aliases are
// expanded, so that nested aliases cannot blow it up.
const maxSpecNodes = 10000

// maxSpecBytes bounds a spec file.
const maxSpecBytes = 1 << 20

// inlineSpec reads a model's inline spec with fit.ParseSpec. The spec's
// name may be left out (the model's name is used); a name that differs from
// the model's is a problem. ParseSpec's problems are reported at the lines
// of the config they come from, with the path under spec.
//
// ParseSpec reads text, so the spec's subtree (${VAR} already expanded,
// aliases resolved) is written out as YAML and read back; the lines of the
// text written are mapped back to the config's lines by walking the two
// trees side by side.
func (p *parser) inlineSpec(e entry, path, model string) *fit.Spec {
	n := e.val
	if p.failed[n] {
		return nil
	}
	if n.Kind != yaml.MappingNode {
		if isNull(n) {
			p.add(e.line, path, "spec has no value: give the model spec (response, family, terms, …) under it, or use spec_file")
		} else {
			p.add(e.line, path, "spec must be a mapping (response, family, terms, …), not %s", describe(n))
		}
		return nil
	}
	budget := maxSpecNodes
	tree, ok := resolved(n, &budget)
	if !ok {
		p.add(e.line, path, "spec is too large once its aliases are expanded (more than %d YAML nodes)", maxSpecNodes)
		return nil
	}
	if line, ok := nameLine(tree); ok {
		name := deref(tree.Content[line+1])
		if name.Kind == yaml.ScalarNode && model != "" && name.Value != model {
			p.add(name.Line, join(path, "name"), "the spec's name %q differs from the model's name %q: leave name out of an inline spec (the model's name is used)", clip(name.Value), model)
			return nil
		}
	} else {
		// An inline spec takes the model's name; ParseSpec needs one.
		key := &yaml.Node{Kind: yaml.ScalarNode, Tag: "!!str", Value: "name", Line: e.line}
		val := &yaml.Node{Kind: yaml.ScalarNode, Tag: "!!str", Value: "unnamed", Line: e.line}
		if model != "" {
			val.Value = model
		}
		tree.Content = append([]*yaml.Node{key, val}, tree.Content...)
	}
	text, err := yaml.Marshal(tree)
	if err != nil {
		p.add(e.line, path, "spec cannot be read: %v", err)
		return nil
	}
	var back yaml.Node
	if err := yaml.Unmarshal(text, &back); err != nil || len(back.Content) == 0 {
		p.add(e.line, path, "spec cannot be read back (%v): write it in block style", err)
		return nil
	}
	lines := map[int]int{}
	mapLines(back.Content[0], tree, lines)
	at := func(l int) int {
		if v, ok := lines[l]; ok && v > 0 {
			return v
		}
		return e.line
	}
	spec, err := fit.ParseSpec(text)
	if err != nil {
		p.specProblems(err, path, func(sp fit.SpecProblem) (int, string, string) { return at(sp.Line), join(path, sp.Path), "" })
		return nil
	}
	for k, l := range spec.Lines {
		spec.Lines[k] = at(l)
	}
	for i := range spec.Terms {
		spec.Terms[i].Line = at(spec.Terms[i].Line)
	}
	return spec
}

// specFile reads a model's spec_file with fit.ParseSpec. ParseSpec's
// problems are reported at the spec_file key, naming the file's line.
func (p *parser) specFile(e entry, path, model string) (string, *fit.Spec) {
	name, ok := p.text(e, path, "the model spec's file, e.g. specs/sonde-07.yaml")
	if !ok {
		return "", nil
	}
	file := name
	if !filepath.IsAbs(file) {
		file = filepath.Join(p.opts.Dir, file)
	}
	data, err := readSpec(file)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			p.add(e.line, path, "spec file %s does not exist (a relative path is read from the config file's folder)", clip(name))
		} else {
			p.add(e.line, path, "cannot read spec file %s: %v", clip(name), err)
		}
		return name, nil
	}
	spec, err := fit.ParseSpec(data)
	if err != nil {
		p.specProblems(err, path, func(sp fit.SpecProblem) (int, string, string) {
			where := name
			if sp.Line > 0 {
				where = fmt.Sprintf("%s line %d", name, sp.Line)
			}
			if sp.Path != "" {
				where += ": " + sp.Path
			}
			return e.line, path, where + ": "
		})
		return name, nil
	}
	return name, spec
}

// readSpec reads a spec file of at most maxSpecBytes.
func readSpec(file string) ([]byte, error) {
	f, err := os.Open(file)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	switch st, err := f.Stat(); {
	case err != nil:
		return nil, err
	case st.IsDir():
		return nil, errors.New("it is a folder; give the spec's file")
	case !st.Mode().IsRegular():
		return nil, errors.New("it is not a regular file")
	}
	data, err := io.ReadAll(io.LimitReader(f, maxSpecBytes+1))
	if err != nil {
		return nil, err
	}
	if len(data) > maxSpecBytes {
		return nil, fmt.Errorf("it is larger than %d KiB: is it the right file?", maxSpecBytes>>10)
	}
	return data, nil
}

// specProblems re-reports ParseSpec's problems, placed by where: the
// config line, the path and a prefix for the message.
func (p *parser) specProblems(err error, path string, where func(fit.SpecProblem) (int, string, string)) {
	var se *fit.SpecError
	if !errors.As(err, &se) || len(se.Problems) == 0 {
		p.add(0, path, "%v", err)
		return
	}
	for _, sp := range se.Problems {
		line, at, prefix := where(sp)
		p.add(line, at, "%s%s", prefix, sp.Message)
	}
}

// nameLine returns the index of the name key in mapping m.
func nameLine(m *yaml.Node) (int, bool) {
	for i := 0; i+1 < len(m.Content); i += 2 {
		if k := deref(m.Content[i]); k.Kind == yaml.ScalarNode && k.Value == "name" {
			return i, true
		}
	}
	return 0, false
}

// resolved returns a copy of the tree under n with every alias replaced by
// a copy of what it names (so that the copy can be written out alone),
// spending one unit of budget per node; false when the budget runs out.
func resolved(n *yaml.Node, budget *int) (*yaml.Node, bool) {
	n = deref(n)
	if *budget--; *budget < 0 {
		return nil, false
	}
	c := *n
	c.Anchor = ""
	c.Alias = nil
	c.Content = make([]*yaml.Node, len(n.Content))
	for i, child := range n.Content {
		r, ok := resolved(child, budget)
		if !ok {
			return nil, false
		}
		c.Content[i] = r
	}
	return &c, true
}

// mapLines walks back (the spec as read back) and orig (the tree written
// out) side by side, recording for each line of back the line of orig it
// came from. The trees have the same shape; the walk stops where they do
// not.
func mapLines(back, orig *yaml.Node, lines map[int]int) {
	if _, seen := lines[back.Line]; !seen {
		lines[back.Line] = orig.Line
	}
	if back.Kind != orig.Kind || len(back.Content) != len(orig.Content) {
		return
	}
	for i := range back.Content {
		mapLines(back.Content[i], orig.Content[i], lines)
	}
}
