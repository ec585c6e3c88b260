package store

import (
	"bytes"
	"errors"
	"strings"
	"testing"
)

// Known digests, so that the framing is checked against SHA-256 itself and not only against
// this package's own encoder.
const (
	// SHA-256 of the empty message: NIST CAVP SHA256ShortMsg.rsp, Len = 0.
	sumEmpty = "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
	// SHA-256 of "hello\n": computed with coreutils, printf 'hello\n' | sha256sum.
	sumHello = "5891b5b522d5df086d0ff0b110fbd9d21bb4fc7163af34d08286a2e846f6be03"
)

func TestAppendChecksumKnownDigests(t *testing.T) {
	for _, tc := range []struct{ body, want string }{
		{"", "sha256 " + sumEmpty + "\n"},
		{"hello\n", "hello\nsha256 " + sumHello + "\n"},
	} {
		if got := string(AppendChecksum([]byte(tc.body))); got != tc.want {
			t.Errorf("AppendChecksum(%q) = %q, want %q", tc.body, got, tc.want)
		}
	}
}

func TestVerify(t *testing.T) {
	hello := "hello\nsha256 " + sumHello + "\n"
	for _, tc := range []struct {
		name, data string
		body       string // the body returned, if ok
		ok         bool
	}{
		{"empty body", "sha256 " + sumEmpty + "\n", "", true},
		{"one line", hello, "hello\n", true},
		{"nothing at all", "", "", false},
		{"no final newline", strings.TrimSuffix(hello, "\n"), "", false},
		{"extra newline", hello + "\n", "", false},
		{"line after the checksum", hello + "more\n", "", false},
		{"upper-case digits", "hello\nsha256 " + strings.ToUpper(sumHello) + "\n", "", false},
		{"CRLF", "hello\nsha256 " + sumHello + "\r\n", "", false},
		{"other algorithm name", "hello\nsha512 " + sumHello + "\n", "", false},
		{"digest one short", "hello\nsha256 " + sumHello[1:] + "\n", "", false},
		{"digest one long", "hello\nsha256 0" + sumHello + "\n", "", false},
		{"body without its newline", "hellosha256 " + sumHello + "\n", "", false},
		{"wrong digest", "hellO\nsha256 " + sumHello + "\n", "", false},
		{"checksum line alone, wrong body", "sha256 " + sumHello + "\n", "", false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			body, err := Verify([]byte(tc.data))
			switch {
			case tc.ok && err != nil:
				t.Fatalf("Verify = %v", err)
			case tc.ok && string(body) != tc.body:
				t.Fatalf("Verify = %q, want %q", body, tc.body)
			case !tc.ok && !errors.Is(err, ErrCorrupt):
				t.Fatalf("Verify = %q, %v; want ErrCorrupt", body, err)
			}
		})
	}
}

// The body Verify returns is capped: appending to it must not overwrite the checksum line.
func TestVerifiedBodyIsCapped(t *testing.T) {
	data := AppendChecksum([]byte("a\n"))
	orig := string(data)
	body, err := Verify(data)
	if err != nil {
		t.Fatal(err)
	}
	_ = append(body, "overwrite"...)
	if string(data) != orig {
		t.Fatalf("appending to the body changed the data: %q", data)
	}
}

func FuzzVerify(f *testing.F) {
	f.Add(AppendChecksum(nil))
	f.Add(AppendChecksum([]byte("hello\n")))
	f.Add(AppendChecksum([]byte("two\nlines\n")))
	f.Add([]byte("hello\n"))
	f.Add([]byte("sha256 \n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		// Whatever verifies is exactly a body and its checksum line.
		if body, err := Verify(data); err == nil {
			if again := AppendChecksum(bytes.Clone(body)); !bytes.Equal(again, data) {
				t.Fatalf("verified %q, which re-frames as %q", data, again)
			}
		} else if !errors.Is(err, ErrCorrupt) {
			t.Fatalf("Verify error %v does not wrap ErrCorrupt", err)
		}
		// Any body of lines frames and verifies back to itself.
		body := data
		if len(body) > 0 && body[len(body)-1] != '\n' {
			body = append(bytes.Clone(body), '\n')
		}
		got, err := Verify(AppendChecksum(bytes.Clone(body)))
		if err != nil || !bytes.Equal(got, body) {
			t.Fatalf("body %q: Verify(AppendChecksum) = %q, %v", body, got, err)
		}
	})
}
