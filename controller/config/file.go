package config

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/BurntSushi/toml"
)

// ErrUnknownKey is wrapped by the error for keys the configuration does not know: a typo must
// not pass silently.
var ErrUnknownKey = errors.New("unknown key")

// Decode reads a TOML configuration into dst, on top of whatever dst holds already (the
// defaults), strictly: every key must be known. dst is a *Config, or a pointer to a struct that
// embeds Config and adds a backend's own sections (the simulator's). It does not validate.
func Decode(r io.Reader, dst any) error {
	md, err := toml.NewDecoder(r).Decode(dst)
	if err != nil {
		return fmt.Errorf("configuration: %w", err)
	}
	if und := md.Undecoded(); len(und) > 0 {
		keys := make([]string, len(und))
		for i, k := range und {
			keys[i] = k.String()
		}
		return fmt.Errorf("configuration: %w: %s", ErrUnknownKey, strings.Join(keys, ", "))
	}
	return nil
}

// DecodeFile is Decode from the file at path.
func DecodeFile(path string, dst any) error {
	f, err := os.Open(path)
	if err != nil {
		return fmt.Errorf("configuration: %w", err)
	}
	defer f.Close()
	if err := Decode(f, dst); err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	return nil
}

// Encode writes src (as Decode takes it) as a TOML configuration with every key written out,
// so that Decode reads back exactly src.
func Encode(w io.Writer, src any) error {
	var b bytes.Buffer
	b.WriteString("# tankd configuration: every key, defaults written out. Units are in the key names;\n")
	b.WriteString("# durations are written like \"500ms\" or \"2s\". See configs/ for commented examples.\n\n")
	if err := toml.NewEncoder(&b).Encode(src); err != nil {
		return fmt.Errorf("configuration: encode: %w", err)
	}
	_, err := w.Write(b.Bytes())
	return err
}
