package store

import (
	"io/fs"
	"os"
)

// fileOps are the filesystem operations of a write, as a seam through which tests inject a
// failure, or a crash, at each step.
type fileOps interface {
	ReadDir(name string) ([]fs.DirEntry, error)
	ReadFile(name string) ([]byte, error)
	CreateTemp(dir, pattern string) (tempFile, error)
	Remove(name string) error
	Link(oldname, newname string) error
	Lstat(name string) (fs.FileInfo, error)
	Rename(oldpath, newpath string) error
	SyncDir(dir string) error
}

type tempFile interface {
	Name() string
	Write(b []byte) (int, error)
	Sync() error
	Close() error
}

// osOps are the real operations.
type osOps struct{}

func (osOps) ReadDir(name string) ([]fs.DirEntry, error) { return os.ReadDir(name) }
func (osOps) ReadFile(name string) ([]byte, error)       { return readBounded(name) }
func (osOps) Remove(name string) error                   { return os.Remove(name) }
func (osOps) Link(oldname, newname string) error         { return os.Link(oldname, newname) }
func (osOps) Lstat(name string) (fs.FileInfo, error)     { return os.Lstat(name) }
func (osOps) Rename(oldpath, newpath string) error       { return os.Rename(oldpath, newpath) }

// CreateTemp creates the file with mode 0600, as os.CreateTemp does.
func (osOps) CreateTemp(dir, pattern string) (tempFile, error) { return os.CreateTemp(dir, pattern) }

func (osOps) SyncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	return err
}
