package main

// repo is the repository root relative to this package.
const repo = "../.."
