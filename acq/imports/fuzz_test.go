package imports

import (
	"context"
	"testing"
	"time"

	"hystd/acq/record"
	"hystd/acq/store/memstore"
)

// FuzzImport: no input makes the import panic; a refused one stores nothing.
func FuzzImport(f *testing.F) {
	fx, sp := loadSetup(&testing.T{})
	f.Add(synth(true, 0, 0)[:4000])
	f.Add("t,I,psi,phase\n0,0,0,pre\n1,0,0,sweep\n2,1,1,sweep\n3,0,2,sweep\n4,-1,0,sweep\n5,0,0,post\n")
	f.Add("t,I,psi\n0,0,0\n0,0,0\n0,0,0\n0,0,0\n0,0,0\n0,1,0\n0,0,0\n")
	f.Add("t (ms);I (mA);psi (uV s);B_probe (mT);temp\n0;1;2;3;4\n")
	f.Add("t,I,psi\n")
	f.Fuzz(func(t *testing.T, data string) {
		st := memstore.New(time.Now)
		_, _, err := Import(context.Background(), Options{File: "f.csv", Data: []byte(data), Fixture: fx, Specimen: sp, Now: now, Writer: st})
		if err != nil {
			if runs, _ := st.Runs(context.Background(), recordFilter()); len(runs) != 0 {
				t.Fatalf("refused (%v) but stored %d runs", err, len(runs))
			}
		}
	})
}

func recordFilter() record.RunFilter { return record.RunFilter{} }
