package sim

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sort"
	"time"

	"hystd/configs"
	"hystd/drivers/instr"
)

// TruthReport is the JSON body of GET /truth: the bench's ground truth as
// its physics knows it (never read through the ports), in SI units, with
// the faults fired so far by kind.
type TruthReport struct {
	TS     float64 `json:"t_s"` // bench time since start, s
	Supply struct {
		CurrentA   float64 `json:"current_a"` // winding current
		SetpointA  float64 `json:"setpoint_a"`
		VoltageV   float64 `json:"voltage_v"`
		OutputOn   bool    `json:"output_on"`
		Tripped    bool    `json:"tripped"`
		Compliance bool    `json:"compliance"`
		OverTemp   bool    `json:"overtemp"`
	} `json:"supply"`
	Winding struct {
		ResistanceOhm float64 `json:"resistance_ohm"`
		TempC         float64 `json:"temp_c"`
	} `json:"winding"`
	Specimen struct {
		HAM float64 `json:"h_a_m"`
		BT  float64 `json:"b_t"`
		JT  float64 `json:"j_t"`
	} `json:"specimen"`
	Faults map[string]int    `json:"faults"` // fired so far, by kind
	Ports  map[string]string `json:"ports"`  // role → pty path
}

// Report returns the truth as GET /truth serves it.
func (b *Bench) Report() TruthReport {
	t := b.Truth()
	var r TruthReport
	r.TS = t.T.Seconds()
	r.Supply.CurrentA, r.Supply.SetpointA, r.Supply.VoltageV = float64(t.I), float64(t.Setpoint), float64(t.V)
	r.Supply.OutputOn, r.Supply.Tripped, r.Supply.Compliance, r.Supply.OverTemp = t.Output, t.Tripped, t.Compliance, t.OverTemp
	r.Winding.ResistanceOhm, r.Winding.TempC = t.Resistance, float64(t.Temp)
	r.Specimen.HAM, r.Specimen.BT, r.Specimen.JT = float64(t.H), float64(t.B), float64(t.J)
	r.Faults = b.Injected()
	for _, k := range []string{FaultDrop, FaultDelay, FaultGarble, FaultHangup, FaultError, FaultTrip} {
		if _, ok := r.Faults[k]; !ok {
			r.Faults[k] = 0
		}
	}
	r.Ports = b.Ports()
	return r
}

// TruthHandler serves GET /truth (TruthReport as JSON) and POST /faults
// (a JSON array of faults, as in a bench file, injected with Inject: for
// test harnesses driving a `hystd sim` child).
func TruthHandler(b *Bench) http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /truth", func(w http.ResponseWriter, _ *http.Request) {
		w.Header().Set("Content-Type", "application/json")
		_ = json.NewEncoder(w).Encode(b.Report())
	})
	mux.HandleFunc("POST /faults", func(w http.ResponseWriter, r *http.Request) {
		var fs []struct {
			Role          string  `json:"role"`
			Kind          string  `json:"kind"`
			AfterCommands int     `json:"after_commands"`
			Probability   float64 `json:"probability"`
			Times         int     `json:"times"`
			DelayS        float64 `json:"delay_s"`
			Code          int     `json:"code"`
			Message       string  `json:"message"`
		}
		dec := json.NewDecoder(io.LimitReader(r.Body, 1<<20))
		dec.DisallowUnknownFields()
		if err := dec.Decode(&fs); err != nil {
			http.Error(w, "POST /faults: body: want a JSON array of faults: "+err.Error(), http.StatusBadRequest)
			return
		}
		for i, f := range fs {
			err := b.Inject(Fault{Role: f.Role, Kind: f.Kind, AfterCommands: f.AfterCommands, Probability: f.Probability,
				Times: f.Times, Delay: secondsDuration(f.DelayS), Code: f.Code, Message: f.Message})
			if err != nil {
				http.Error(w, fmt.Sprintf("POST /faults: fault %d: %v (faults before it were injected)", i, err), http.StatusBadRequest)
				return
			}
		}
		w.WriteHeader(http.StatusNoContent)
	})
	return mux
}

// ListenLoopback listens on addr, which must be a loopback address
// (127.0.0.0/8, ::1 or localhost): the truth is for tests and tools on
// this machine.
func ListenLoopback(addr string) (net.Listener, error) {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return nil, fmt.Errorf("--truth %q: want HOST:PORT on loopback, e.g. 127.0.0.1:8765: %w", addr, err)
	}
	if host != "localhost" {
		ip := net.ParseIP(host)
		if ip == nil || !ip.IsLoopback() {
			return nil, fmt.Errorf("--truth %q: %q is not a loopback address; the truth is served on loopback only", addr, host)
		}
	}
	return net.Listen("tcp", addr)
}

// LinkNames are the stable link names MakeLinks creates, one per role.
var LinkNames = []string{instr.RoleSupply, instr.RoleIntegrator, instr.RoleFieldMeter, instr.RoleThermometer}

// MakeLinks creates (or replaces) dir/<role> as a symbolic link to each
// role's pty, so that fixture files can name dir/supply and need no editing
// between starts. Each link is replaced atomically (a new link renamed over
// the old one). It returns the paths made.
func MakeLinks(dir string, ports map[string]string) ([]string, error) {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("--links: %w", err)
	}
	roles := make([]string, 0, len(ports))
	for r := range ports {
		roles = append(roles, r)
	}
	sort.Strings(roles)
	var made []string
	for _, r := range roles {
		link := filepath.Join(dir, r)
		if fi, err := os.Lstat(link); err == nil && fi.Mode()&os.ModeSymlink == 0 {
			return made, fmt.Errorf("--links: %s exists and is not a symbolic link; not replaced", link)
		}
		tmp := link + ".new"
		_ = os.Remove(tmp)
		if err := os.Symlink(ports[r], tmp); err != nil {
			return made, fmt.Errorf("--links: %w", err)
		}
		if err := os.Rename(tmp, link); err != nil {
			os.Remove(tmp)
			return made, fmt.Errorf("--links: %w", err)
		}
		made = append(made, link)
	}
	return made, nil
}

// RemoveLinks removes the links MakeLinks made that still point at ports.
func RemoveLinks(links []string, ports map[string]string) error {
	var errs []error
	want := map[string]bool{}
	for _, p := range ports {
		want[p] = true
	}
	for _, l := range links {
		if t, err := os.Readlink(l); err == nil && want[t] {
			if err := os.Remove(l); err != nil && !errors.Is(err, os.ErrNotExist) {
				errs = append(errs, err)
			}
		}
	}
	return errors.Join(errs...)
}

func secondsDuration(s float64) configs.Duration {
	return configs.Duration(time.Duration(s * float64(time.Second)))
}
