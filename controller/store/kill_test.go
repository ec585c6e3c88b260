package store

import (
	"bufio"
	"bytes"
	"errors"
	"flag"
	"fmt"
	"io"
	"io/fs"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"testing"
)

// The crash test proper: a child process (this test binary, re-run) saves a file again and
// again, saying so after every save; the parent kills it with SIGKILL in the middle of a save,
// checks the files, and starts another child on the same directory, many times over. After
// every kill the main file must be good (a kill cannot tear a rename) and hold at least the
// last save reported, and once two saves have completed the previous copy must exist and
// verify. Where in a save each kill lands is up to the scheduler and differs from run to run;
// what is checked holds wherever it lands, so the test cannot flake, and the counts it logs
// show how the kills fell. -kills sets how many: 200 by default, a second or so; thousands
// for a soak.

var kills = flag.Int("kills", 200, "number of SIGKILLs TestWriteSurvivesKill sends to saving child processes")

const (
	childEnv = "TANKD_STORE_SAVE_CHILD"
	// childSaves bounds a child's loop, so that it stops by itself if nobody kills it.
	childSaves = 1000
	// killSeed fixes which save each kill follows and how long the parent waits: common
	// practice, any fixed value.
	killSeed = 20260102
	// maxSpin bounds the parent's busy loop before a kill. At a nanosecond or so an iteration
	// (from memory) it spans a few milliseconds, a save with its two fsyncs or a few
	// (BenchmarkWriteFile measures about 4 ms a save on an ext4 virtual disk), so that kills
	// land all through a save.
	maxSpin = 4 << 20
)

func TestWriteSurvivesKill(t *testing.T) {
	if dir := os.Getenv(childEnv); dir != "" {
		saveUntilKilled(dir)
		return
	}
	exe, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	path := filepath.Join(dir, "state")
	rng := rand.New(rand.NewPCG(killSeed, killSeed))
	var (
		saved    int // saves the children reported, all told
		last     int // the generation of the last reported save
		noPrev   int // kills after which the previous copy was missing, once it had to exist
		midWrite int // kills that left a temporary file: they landed inside a save
		linked   int // kills that left the previous copy a link of the main file: just before its replacement
	)
	for k := 1; k <= *kills; k++ {
		// Kill just after a report, as the next save begins (where the previous copy is
		// made), or after a busy wait of up to a save or a few.
		after, spin := 1+rng.IntN(2), 0
		if rng.IntN(2) == 0 {
			spin = rng.IntN(maxSpin)
		}
		n, gen, err := runAndKill(exe, dir, after, spin)
		if err != nil {
			t.Fatalf("kill %d: %v", k, err)
		}
		saved += n
		last = max(last, gen)

		body, err := ReadFile(path)
		if err != nil {
			t.Fatalf("kill %d: ReadFile: %v", k, err)
		}
		cur, err := generation(body)
		if err != nil || cur < last {
			t.Fatalf("kill %d: main file holds generation %d (%v); generation %d had been saved", k, cur, err, last)
		}
		if saved >= 2 {
			data, err := os.ReadFile(path + PrevSuffix)
			switch {
			case errors.Is(err, fs.ErrNotExist):
				noPrev++
			case err != nil:
				t.Fatalf("kill %d: previous copy: %v", k, err)
			default:
				pbody, err := Verify(data)
				if err != nil {
					t.Fatalf("kill %d: previous copy: %v", k, err)
				}
				// The previous copy is the save before the last one reported, or a later one.
				if pg, err := generation(pbody); err != nil || pg < last-1 || pg > cur {
					t.Fatalf("kill %d: previous copy holds generation %d (%v); main %d, last saved %d", k, pg, err, cur, last)
				}
			}
		}
		if hasTemps(t, dir) {
			midWrite++
		}
		if sameFile(path, path+PrevSuffix) {
			linked++
		}
	}
	t.Logf("%d kills, %d saves reported; kills that left a temporary file %d, that left the previous copy "+
		"linked to the main file %d, after which the previous copy was missing %d",
		*kills, saved, midWrite, linked, noPrev)
	if noPrev > 0 {
		t.Errorf("the previous copy was missing after %d of %d kills (%.1f%%)", noPrev, *kills, 100*float64(noPrev)/float64(*kills))
	}
	// Whatever the kills left half-done, the next write clears away.
	mustWrite(t, path, genBody(last+1))
	if hasTemps(t, dir) {
		t.Fatal("temporary files left behind after a clean write")
	}
}

// runAndKill starts a child saving in dir, kills it after it has reported after saves and the
// parent has spun spin times, and returns the number of saves it reported and the generation of
// the last one.
func runAndKill(exe, dir string, after, spin int) (saves, last int, err error) {
	cmd := exec.Command(exe, "-test.run=^TestWriteSurvivesKill$")
	cmd.Env = append(os.Environ(), childEnv+"="+dir)
	cmd.Stderr = os.Stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		return 0, 0, err
	}
	if err := cmd.Start(); err != nil {
		return 0, 0, err
	}
	defer cmd.Wait()
	sc := bufio.NewScanner(out)
	for saves < after && sc.Scan() {
		g, ok := strings.CutPrefix(sc.Text(), "saved ")
		if !ok {
			if strings.HasPrefix(sc.Text(), "error") {
				cmd.Process.Kill()
				return saves, last, fmt.Errorf("child: %s", sc.Text())
			}
			continue
		}
		if last, err = strconv.Atoi(g); err != nil {
			cmd.Process.Kill()
			return saves, last, fmt.Errorf("child said %q", sc.Text())
		}
		saves++
	}
	spinFor(spin)
	// A child that has finished its loop (only if the parent was kept from running for a
	// long while) died no death, but left files no less to check.
	if err := cmd.Process.Kill(); err != nil && !errors.Is(err, os.ErrProcessDone) {
		return saves, last, fmt.Errorf("kill the child: %w", err)
	}
	// Saves reported after the kill was sent still happened.
	rest, _ := io.ReadAll(out)
	for l := range strings.Lines(string(rest)) {
		if g, ok := strings.CutPrefix(strings.TrimSuffix(l, "\n"), "saved "); ok {
			if n, err := strconv.Atoi(g); err == nil {
				saves, last = saves+1, n
			}
		}
	}
	if saves < after {
		return saves, last, fmt.Errorf("the child reported only %d saves", saves)
	}
	return saves, last, nil
}

// spinFor busies the parent for n iterations: a delay measured in work, not in time.
func spinFor(n int) {
	x := uint64(n)
	for range n {
		x = x*6364136223846793005 + 1 // Knuth's MMIX LCG multiplier, from memory
	}
	runtime.KeepAlive(x) // or the compiler may drop the loop
}

func hasTemps(t *testing.T, dir string) bool {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range ents {
		if strings.Contains(e.Name(), tempInfix) {
			return true
		}
	}
	return false
}

func sameFile(a, b string) bool {
	sa, err := os.Stat(a)
	if err != nil {
		return false
	}
	sb, err := os.Stat(b)
	return err == nil && os.SameFile(sa, sb)
}

// genBody is the body of the n-th save: its generation, and padding enough that a kill often
// lands while the data is being written.
func genBody(n int) []byte {
	b := fmt.Appendf(nil, "generation %d\n", n)
	for i := range 64 {
		b = fmt.Appendf(b, "line %04d %s\n", i, strings.Repeat("=", 80))
	}
	return b
}

func generation(body []byte) (int, error) {
	first, _, _ := bytes.Cut(body, []byte{'\n'})
	g, ok := bytes.CutPrefix(first, []byte("generation "))
	if !ok {
		return 0, fmt.Errorf("no generation line in %.40q", body)
	}
	return strconv.Atoi(string(g))
}

// saveUntilKilled is the child: carry on from the generation on disk, save the next, report,
// again.
func saveUntilKilled(dir string) {
	path := filepath.Join(dir, "state")
	gen := 0
	switch body, err := ReadFile(path); {
	case errors.Is(err, fs.ErrNotExist):
	case err != nil:
		fmt.Println("error", err)
		return
	default:
		if gen, err = generation(body); err != nil {
			fmt.Println("error", err)
			return
		}
	}
	for range childSaves {
		gen++
		if err := WriteFile(path, genBody(gen)); err != nil {
			fmt.Println("error", err)
			return
		}
		fmt.Printf("saved %d\n", gen)
	}
}
