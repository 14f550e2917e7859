// Package configtest gives tests the shipped ring bench: the fixture
// configs/fixture-ring-bench.yaml and its ring specimen R17
// (configs/specimen-ring-r17.yaml), parsed, as bytes with the bench's ports,
// or copied beside a daemon config.
package configtest

import (
	"bytes"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"testing"

	"hystd/acq/config"
	"hystd/configs"
	"hystd/drivers/instr"
)

// The shipped ring bench's files, as a daemon config names them.
const (
	RingFixtureFile  = "fixture-ring-bench.yaml"
	RingSpecimenFile = "specimen-ring-r17.yaml"
)

// Ring returns the shipped ring fixture and ring specimen R17.
func Ring(t testing.TB) (config.Fixture, config.Specimen) {
	t.Helper()
	fx, sp := RingBytes(t, nil)
	f, err := config.ParseFixture(RingFixtureFile, fx)
	if err != nil {
		t.Fatal(err)
	}
	s, err := config.ParseSpecimen(RingSpecimenFile, sp)
	if err != nil {
		t.Fatal(err)
	}
	return f, s
}

// RingBytes returns the two files; the fixture's ports (/dev/ttyUSB0…3,
// one per role in role order) replaced by ports[role] where ports names one.
func RingBytes(t testing.TB, ports map[string]string) (fixture, specimen []byte) {
	t.Helper()
	fixture, specimen = read(t, RingFixtureFile), read(t, RingSpecimenFile)
	for i, role := range []string{instr.RoleSupply, instr.RoleIntegrator, instr.RoleFieldMeter, instr.RoleThermometer} {
		if p, ok := ports[role]; ok {
			fixture = bytes.ReplaceAll(fixture, []byte(fmt.Sprintf("/dev/ttyUSB%d", i)), []byte(p))
		}
	}
	return fixture, specimen
}

// WriteRing copies the two files, as shipped, into dir.
func WriteRing(t testing.TB, dir string) {
	t.Helper()
	for _, f := range []string{RingFixtureFile, RingSpecimenFile} {
		if err := os.WriteFile(filepath.Join(dir, f), read(t, f), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

func read(t testing.TB, name string) []byte {
	t.Helper()
	b, err := fs.ReadFile(configs.Samples, name)
	if err != nil {
		t.Fatal(err)
	}
	return b
}
