package main

import (
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"
)

func TestWriteAtomic(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "out.csv")
	if err := os.WriteFile(path, []byte("old"), 0o600); err != nil {
		t.Fatal(err)
	}

	// A failed write leaves the old contents and no temporary file.
	failure := errors.New("disk on fire")
	err := writeAtomic(path, func(w io.Writer) error {
		io.WriteString(w, "half of the new")
		return failure
	})
	if !errors.Is(err, failure) {
		t.Fatalf("writeAtomic = %v, want the writer's error", err)
	}
	checkFile(t, path, "old")
	if entries, _ := os.ReadDir(dir); len(entries) != 1 {
		t.Errorf("the folder holds %d entries after a failed write, want 1", len(entries))
	}

	// A good write replaces the contents and keeps the permissions.
	if err := writeAtomic(path, func(w io.Writer) error {
		_, err := io.WriteString(w, "new")
		return err
	}); err != nil {
		t.Fatal(err)
	}
	checkFile(t, path, "new")
	if st, _ := os.Stat(path); st.Mode().Perm() != 0o600 {
		t.Errorf("mode %v after replacing, want 0600 as before", st.Mode().Perm())
	}
}

func checkFile(t *testing.T, path, want string) {
	t.Helper()
	got, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if string(got) != want {
		t.Errorf("%s holds %q, want %q", path, got, want)
	}
}
