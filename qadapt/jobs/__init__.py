"""The jobs behind ``qadapt JOB``, one module each; ``main(argv)`` is each job's entry point."""
