package store

import (
	"bufio"
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// The crash test proper: a child process (this test binary, re-run) writes a growing file in a
// loop and says so after every write; the parent kills it with SIGKILL after some writes,
// mid-way through another, and the file on disk must hold at least every line the child
// reported written, read without falling back.

const childEnv = "TANKD_STORE_WRITE_CHILD"

// childWrites bounds the child's loop, so that it stops by itself if nobody kills it.
const childWrites = 400

func TestWriteSurvivesKill(t *testing.T) {
	if dir := os.Getenv(childEnv); dir != "" {
		writeForever(dir)
		return
	}
	dir := t.TempDir()
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(exe, "-test.run=^TestWriteSurvivesKill$")
	cmd.Env = append(os.Environ(), childEnv+"="+dir)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	const killAfter = 40
	sc := bufio.NewScanner(out)
	written := 0
	for written < killAfter && sc.Scan() {
		n, ok := strings.CutPrefix(sc.Text(), "written ")
		if !ok {
			if strings.HasPrefix(sc.Text(), "error") {
				t.Errorf("child: %s", sc.Text())
			}
			continue
		}
		if written, err = strconv.Atoi(n); err != nil {
			t.Fatalf("child said %q", sc.Text())
		}
	}
	if err := cmd.Process.Kill(); err != nil {
		t.Fatal(err)
	}
	cmd.Wait()
	if written < killAfter {
		t.Fatalf("the child reported only %d writes", written)
	}
	path := filepath.Join(dir, "state")
	body, err := ReadFile(path)
	if err != nil {
		t.Fatalf("ReadFile after SIGKILL: %v", err)
	}
	n := bytes.Count(body, []byte{'\n'})
	if n < written {
		t.Fatalf("after SIGKILL the file has %d lines; the child had written %d", n, written)
	}
	if want := childBody(n); !bytes.Equal(body, want) {
		t.Fatalf("after SIGKILL the file holds %q, not the child's %d lines", body, n)
	}
	// Whatever the kill left half-done, the next write clears away.
	mustWrite(t, path, childBody(n+1))
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range ents {
		if strings.Contains(e.Name(), tempInfix) {
			t.Fatalf("%s left behind after the next write", e.Name())
		}
	}
}

// childBody is what the child writes the n-th time: n lines, long enough that a kill often
// lands inside a write.
func childBody(n int) []byte {
	var b []byte
	for i := range n {
		b = fmt.Appendf(b, "line %04d %s\n", i, strings.Repeat("=", 80))
	}
	return b
}

// writeForever is the child: write one more line, report, again.
func writeForever(dir string) {
	path := filepath.Join(dir, "state")
	for i := 1; i <= childWrites; i++ {
		if err := WriteFile(path, childBody(i)); err != nil {
			fmt.Println("error", err)
			return
		}
		fmt.Printf("written %d\n", i)
	}
}
