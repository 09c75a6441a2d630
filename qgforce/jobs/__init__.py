"""The jobs the command line runs, one small module each, as plain functions over the library."""
