package memstore_test

import (
	"testing"

	"hystd/acq/store/memstore"
	"hystd/acq/store/storetest"
)

func TestSuite(t *testing.T) {
	storetest.Run(t, func(t *testing.T) storetest.Backend { return memstore.New(nil) })
}
