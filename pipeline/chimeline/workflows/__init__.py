"""Workflows: run, evaluate, compare, rerun, synth and demo. Sequencing, timings and output folders."""
