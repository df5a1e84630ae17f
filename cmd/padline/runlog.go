package main

import "padline/store/plant"

// isPlantURL reports whether --db names the plant store.
func isPlantURL(s string) bool { return plant.IsURL(s) }
