"""Side tables (GNSS tracks) as spreadsheets and pandas write them: an unnamed index column
first, tabs with decimal commas."""

import numpy as np

from slicer.geometry.positions import read_track


def test_a_pandas_index_column_does_not_shift_the_others(tmp_path):
    # DataFrame.to_csv() writes an unnamed index column first: ",trace,x,y"
    path = tmp_path / "track.csv"
    path.write_text(",trace,x,y\n0,0,512000.0,4650000.0\n1,50,512002.5,4650000.0\n"
                    "2,100,512005.0,4650000.5\n")
    track = read_track(path)
    np.testing.assert_array_equal(track.keys, [0, 50, 100])
    np.testing.assert_array_equal(track.first, [512000.0, 512002.5, 512005.0])
    np.testing.assert_array_equal(track.second, [4650000.0, 4650000.0, 4650000.5])


def test_tabs_with_decimal_commas(tmp_path):
    # a spreadsheet's "Unicode text" export in a decimal-comma locale: UTF-16, tabs
    path = tmp_path / "track.txt"
    path.write_bytes("trace\tx\ty\n0\t512000,25\t4650000,5\n80\t512004,25\t4650000,5\n"
                     .encode("utf-16"))
    track = read_track(path)
    np.testing.assert_array_equal(track.first, [512000.25, 512004.25])
    np.testing.assert_array_equal(track.second, [4650000.5, 4650000.5])
