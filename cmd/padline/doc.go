// Command padline is CLI wiring only: cobra commands, viper configuration
// parsed into plain structs and validated here, and the mapping of errors to
// exit codes. It is the only package that knows every other padline package;
// domain logic lives below it.
package main
