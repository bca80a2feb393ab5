"""Making datasets: the writer and its staging area, collection from a vector env, import
from a user's arrays, splitting by episode, and invented data for benchmarks."""
