// Command padline runs end-of-line tests of firmware-free capacitive touch
// switches: it finds each unit's trip capacitance on a relay-switched
// capacitor ladder, judges it against limits from the circuit's timing model,
// and logs every serial's result to a SQLite shift log.
//
// This package is CLI wiring only: cobra commands with their flags and
// help, printing, and the mapping of errors to exit codes. Every rule of the
// product (configuration, the gate, the unit loop, limits, drift analysis,
// the demo shift, studies, status, history views) lives in the library
// packages below it (DEVELOPERS.md "Package map").
//
// Inside the package, files depend one way, top to bottom:
//
//  1. the process and the command tree: main.go and signals.go (signals,
//     exit codes), root.go, commands.go (the list of command families),
//     help.go (the long help, prose in help/*.txt), help_topics.go (the
//     file-format help topics);
//  2. command families, each a builder with its flags and help, a call into
//     the library and the printing of its answer:
//     limits.go; demo_cmd.go; history_cmd.go; drift_cmd.go with
//     drift_baseline.go and drift_study.go; run.go with run_screen.go and
//     station_plant.go; station_cmd.go (check, study, status) with
//     station_study_cmd.go; bringup_cmd.go (station validate and
//     register-ref, limits versions); plant_cmd.go; line.go.
//     A family uses its own files and floor 3, never another family;
//  3. helpers that know no command: shiftlog.go (where the shift log is),
//     terminal.go, version.go, gpio.go (the GPIO openers),
//     flags.go (flags shared by several families), testhook.go (the torture tests' unit hold and scan marks).
package main
