package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"

	"github.com/curvewatch/curvewatch/fit"
)

// checkOutput fails early, before any long work, when path cannot be
// written: its folder is missing, or it names one of the inputs.
func checkOutput(path string, inputs ...string) error {
	dir := filepath.Dir(path)
	st, err := os.Stat(dir)
	if err != nil || !st.IsDir() {
		return fmt.Errorf("cannot write %s: folder %s does not exist; create it first", path, dir)
	}
	out, err := os.Stat(path)
	if err != nil {
		return nil // a new file
	}
	if out.IsDir() {
		return fmt.Errorf("cannot write %s: it is a folder; give a file name", path)
	}
	for _, in := range inputs {
		if st, err := os.Stat(in); err == nil && os.SameFile(st, out) {
			return fmt.Errorf("%s is also an input; write the output to another file", path)
		}
	}
	return nil
}

// writeAtomic writes a file through write, first to a temporary file in
// the same folder and then renaming it over path, so that path holds either
// its old contents or all of the new ones, never part of them. A file that
// already exists keeps its permissions; a new one gets 0644.
func writeAtomic(path string, write func(w io.Writer) error) (err error) {
	mode := fs.FileMode(0o644)
	if st, err := os.Stat(path); err == nil {
		mode = st.Mode().Perm()
	}
	tmp, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+".*.tmp")
	if err != nil {
		return fmt.Errorf("cannot write %s: %w", path, err)
	}
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
		}
	}()
	bw := bufio.NewWriterSize(tmp, 64<<10)
	if err := write(bw); err != nil {
		return err
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("cannot write %s: %w", path, err)
	}
	if err := tmp.Chmod(mode); err != nil {
		return fmt.Errorf("cannot write %s: %w", path, err)
	}
	if err := tmp.Sync(); err != nil {
		return fmt.Errorf("cannot write %s: %w", path, err)
	}
	if err := tmp.Close(); err != nil {
		return fmt.Errorf("cannot write %s: %w", path, err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("cannot write %s: %w", path, err)
	}
	syncDir(filepath.Dir(path))
	return nil
}

// syncDir asks the file system to record a rename in dir. It is best
// effort: some systems cannot sync a folder, and the data are already safe.
func syncDir(dir string) {
	d, err := os.Open(dir)
	if err != nil {
		return
	}
	d.Sync()
	d.Close()
}

// writeDocument writes doc to path as indented JSON, atomically.
func writeDocument(path string, doc *fit.Document) error {
	return writeAtomic(path, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		if err := enc.Encode(doc); err != nil {
			return fmt.Errorf("cannot encode the fit document for %s: %w", path, err)
		}
		return nil
	})
}

// readDocument reads a fit document written by `curvewatch fit`.
func readDocument(path string) (*fit.Document, error) {
	f, err := os.Open(path)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, fmt.Errorf("fit document %s does not exist; write one with 'curvewatch fit'", path)
		}
		return nil, err
	}
	defer f.Close()
	var doc fit.Document
	if err := json.NewDecoder(bufio.NewReader(f)).Decode(&doc); err != nil {
		var syn *json.SyntaxError
		if errors.As(err, &syn) {
			return nil, fmt.Errorf("%s is not valid JSON (at byte %d: %v); is it a fit document written by 'curvewatch fit'?", path, syn.Offset, err)
		}
		return nil, fmt.Errorf("%s is not a fit document: %w", path, err)
	}
	if doc.Format != fit.FormatVersion {
		if doc.Format == "" {
			return nil, fmt.Errorf("%s is not a fit document (it has no \"format\": %q); write one with 'curvewatch fit'", path, fit.FormatVersion)
		}
		return nil, fmt.Errorf("%s has format %q, which this curvewatch does not read (it reads %q); refit with this version", path, doc.Format, fit.FormatVersion)
	}
	return &doc, nil
}
