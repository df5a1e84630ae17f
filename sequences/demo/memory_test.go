package demo

import (
	"context"
	"runtime"
	"testing"
)

// The demo keeps no unit: the heap a finished shift holds does not grow
// with the shift's length. When every unit was kept it grew about 1 KB a
// unit (peak RSS 26 → 129 MB from 2,000 to 100,000 units), so 600 more
// units held about 600 KB more.
func TestShiftHeapFlat(t *testing.T) {
	live := func(units int) uint64 {
		res, err := Run(context.Background(), Options{Variant: "QM-205", Station: "demo-sim", Units: units, Seed: 1, Search: "bracket"})
		if err != nil {
			t.Fatal(err)
		}
		runtime.GC()
		runtime.GC()
		var m runtime.MemStats
		runtime.ReadMemStats(&m)
		runtime.KeepAlive(res)
		return m.HeapAlloc
	}
	live(20) // warm caches that live for the process
	small, big := live(50), live(650)
	t.Logf("heap held after the shift: %d KB at 50 units, %d KB at 650", small>>10, big>>10)
	if big > small+150<<10 {
		t.Errorf("600 more units hold %d KB more heap; want < 150 KB (the demo keeps no unit)", (big-small)>>10)
	}
}
