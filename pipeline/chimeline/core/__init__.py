"""Small shared helpers with no chimeline dependencies above errors: circular arrays, robust-statistics
constants, random streams, hashing, mapping merges and lazy imports."""
