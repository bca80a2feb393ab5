"""Drawing training batches from datasets: the mixture sampler, shares and their schedule,
the batch type, reusable block memory and row gathering."""
