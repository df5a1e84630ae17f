package session

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	yaml "go.yaml.in/yaml/v3"
)

// MaxConfigBytes is the largest variant or station file read: a real one
// is a few kilobytes; a larger file is refused before it is parsed (deeply
// nested YAML parses in time that grows faster than its size).
const MaxConfigBytes = 1 << 20

// maxConfigDepth is the deepest nesting of sections and lists a config file
// may have; the deepest real key (reference_units[i].sim_defects[j]) is 4.
const maxConfigDepth = 16

// readConfigFile reads path, refusing anything that is not a regular file
// and anything over MaxConfigBytes, without reading more than that.
func readConfigFile(path, kind string) ([]byte, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("read %s: %w", kind, err)
	}
	defer f.Close()
	fi, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("read %s: %w", kind, err)
	}
	if !fi.Mode().IsRegular() {
		return nil, &ConfigError{File: path, Msg: fmt.Sprintf("not a regular file (%s): give the %s file itself", fi.Mode().Type(), kind)}
	}
	raw, err := io.ReadAll(io.LimitReader(f, MaxConfigBytes+1))
	if err != nil {
		return nil, fmt.Errorf("read %s: %w", kind, err)
	}
	if len(raw) > MaxConfigBytes {
		return nil, &ConfigError{File: path, Msg: fmt.Sprintf("file is over %d bytes: a %s file is a few kilobytes; not read", MaxConfigBytes, kind)}
	}
	return raw, nil
}

// strictKeys walks raw's YAML before viper reads it. Viper folds keys to
// lower case and reads "a.b" as key b under a, so "Trip_By_PF" or
// "spec.trip_by_pf" would silently replace spec: trip_by_pf. Here every key
// must be written exactly (lower case, no dot) and only once in its
// section, or the file is refused naming file and key.
func strictKeys(file string, raw []byte) error {
	dec := yaml.NewDecoder(bytes.NewReader(raw))
	var root yaml.Node
	if err := dec.Decode(&root); err != nil {
		if errors.Is(err, io.EOF) {
			return nil
		}
		// viper reports syntax errors in its own words; leave them to it.
		return nil
	}
	var more yaml.Node
	if err := dec.Decode(&more); err == nil {
		return &ConfigError{File: file, Msg: "holds more than one YAML document (a line '---'): one file, one document"}
	}
	return walkKeys(file, "", &root, 0)
}

func walkKeys(file, prefix string, n *yaml.Node, depth int) error {
	if depth > maxConfigDepth {
		return &ConfigError{File: file, Key: strings.TrimPrefix(prefix, "."), Msg: fmt.Sprintf("nested deeper than %d levels", maxConfigDepth)}
	}
	switch n.Kind {
	case yaml.DocumentNode:
		for _, c := range n.Content {
			if err := walkKeys(file, prefix, c, depth); err != nil {
				return err
			}
		}
	case yaml.SequenceNode:
		for i, c := range n.Content {
			if err := walkKeys(file, fmt.Sprintf("%s[%d]", prefix, i), c, depth+1); err != nil {
				return err
			}
		}
	case yaml.MappingNode:
		seen := map[string]string{}
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			if k.Kind != yaml.ScalarNode || k.Tag == "!!merge" || k.Value == "<<" {
				return &ConfigError{File: file, Key: keyPath(prefix, k.Value), Msg: "want a plain key name (no merge keys, aliases or complex keys)"}
			}
			name := k.Value
			key := keyPath(prefix, name)
			switch {
			case strings.Contains(name, "."):
				return &ConfigError{File: file, Key: keyPath(prefix, fmt.Sprintf("%q", name)), Msg: "a key may not contain '.': write each section as its own key with its keys indented under it"}
			case name != strings.ToLower(name):
				return &ConfigError{File: file, Key: key, Msg: fmt.Sprintf("keys are written in lower case: %s", strings.ToLower(name))}
			}
			if first, dup := seen[strings.ToLower(name)]; dup {
				return &ConfigError{File: file, Key: key, Msg: fmt.Sprintf("given twice in its section (first as %s)", first)}
			}
			seen[strings.ToLower(name)] = name
			if err := walkKeys(file, "."+key, v, depth+1); err != nil {
				return err
			}
		}
	case yaml.AliasNode:
		return &ConfigError{File: file, Key: strings.TrimPrefix(prefix, "."), Msg: "YAML aliases (*name) are not read: write the value out"}
	}
	return nil
}

func keyPath(prefix, name string) string {
	return strings.TrimPrefix(prefix+"."+name, ".")
}
