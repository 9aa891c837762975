"""The validation render: estimates over a grid of normals compared with the exact reference, error
metrics, and the tuning of one-sample MIS.  Computation only; files are written by :mod:`envsample.reports`."""
