package store

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"
)

func TestWriteFileReplacesAtomically(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "unit.ckpt")
	if err := WriteFile(p, []byte("first"), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := WriteFile(p, []byte("second version"), 0o600); err != nil {
		t.Fatal(err)
	}
	got, err := os.ReadFile(p)
	if err != nil || !bytes.Equal(got, []byte("second version")) {
		t.Fatalf("got %q, %v", got, err)
	}
	// No temporary files are left behind.
	ents, _ := os.ReadDir(dir)
	if len(ents) != 1 {
		t.Errorf("directory holds %d entries, want 1", len(ents))
	}
	if fi, _ := os.Stat(p); fi.Mode().Perm() != 0o600 {
		t.Errorf("mode %v", fi.Mode())
	}
}

func TestWriteFileMissingDir(t *testing.T) {
	if err := WriteFile(filepath.Join(t.TempDir(), "no", "such", "x"), []byte("x"), 0o600); err == nil {
		t.Fatal("want an error for a missing directory")
	}
}
