"""Physical models that write synthetic instrument data, for tests and the demo.

Each generator takes the model's parameters (with units in their names) and a
``numpy.random.Generator`` for noise, and returns a DataFrame in the upload format's
columns; :func:`server.ingest.table.to_csv_bytes` turns it into an instrument file.
"""
