// Command padline runs end-of-line tests of firmware-free capacitive touch
// switches: it finds each unit's trip capacitance on a relay-switched
// capacitor ladder, judges it against limits from the circuit's timing model,
// and logs every serial's result to a SQLite shift log.
//
// This package is CLI wiring only: cobra commands, viper configuration
// parsed into plain structs and validated here, and the mapping of errors to
// exit codes. It is the only package that knows every other padline package;
// domain logic lives below it.
package main
