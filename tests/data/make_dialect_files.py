"""Write the hand-made export files of ``dialects.toml`` (run once; the files are committed).

Each file shows one dialect feature in a few lines. The text below is the content; only the
encoding or compression is applied here, because UTF-16, Latin-1 and gzip files cannot be
typed into an editor reliably. Expected values in the tests are hand-calculated from it.
"""

import gzip
from pathlib import Path

HERE = Path(__file__).resolve().parent

FILES = {
    # Latin-1, ';' delimiter, decimal comma, 2 lines before the header, a unit row,
    # day-first timestamps at a fixed offset +02:00, interval-end labels, W and kW/m2.
    "d_semicolon_latin1.csv": ("latin-1", (
        "Logger export;;;;\n"
        "Generated 2023-06-02 12:00;;;;\n"
        "Zeit;INV1 P;INV2 P;Einstrahlung;Modultemp\n"
        ";W;W;kW/m²;°C\n"
        "02.06.2023 12:15;50500,0;51000;0,8;40,5\n"
        "02.06.2023 12:30;52000,5;#N/A;0,825;41\n"
        "02.06.2023 12:45;-;53000;0,85;41,5\n"
        "02.06.2023 13:00;54000;54000,0;0,9;42,0\n")),
    # UTF-16 with byte-order mark, tab delimited, epoch seconds, interval-start labels, MW and K.
    "d_utf16_tab.txt": ("utf-16", (
        "epoch\tINV1_MW\tTMOD_K\n"
        "1685700000\t0.0505\t313.65\n"
        "1685700300\t0.0510\t314.15\n"
        "1685700600\tNaN\t314.65\n")),
    # UTF-8 with byte-order mark, ISO 8601 with 'Z', module temperature in °F.
    "d_bom.csv": ("utf-8-sig", (
        "ts,INV1_PAC,TMOD_F\n"
        "2023-06-02T10:00:00Z,50.0,104.0\n"
        "2023-06-02T10:05:00Z,51.0,105.8\n"
        "2023-06-02T10:10:00Z,52.0,107.6\n")),
    # gzip-compressed UTF-8, UTC, interval-start labels.
    "d_gzip.csv.gz": ("gzip", (
        "Time,INV1_PAC,INV2_PAC,Irr,TMod\n"
        "2023-06-03 10:00,60.0,61.0,900,45.0\n"
        "2023-06-03 10:15,62.0,63.0,910,45.5\n")),
    # Europe/Madrid local time with DST, interval-end labels, 30-min steps across the
    # autumn change 2023-10-29 (03:00 CEST -> 02:00 CET): the wall times 02:00 and 02:30
    # appear twice, first in CEST then in CET.
    "d_dst_autumn.csv": ("utf-8", (
        "Time,INV1_PAC\n"
        "2023-10-29 01:30,1.0\n"
        "2023-10-29 02:00,2.0\n"
        "2023-10-29 02:30,3.0\n"
        "2023-10-29 02:00,4.0\n"
        "2023-10-29 02:30,5.0\n"
        "2023-10-29 03:00,6.0\n"
        "2023-10-29 03:30,7.0\n")),
    # Europe/Madrid, interval-end labels, 30-min steps across the spring change 2023-03-26
    # (02:00 CET -> 03:00 CEST); the logger wrongly wrote 02:30, which does not exist.
    "d_dst_spring.csv": ("utf-8", (
        "Time,INV1_PAC\n"
        "2023-03-26 01:00,1.0\n"
        "2023-03-26 01:30,2.0\n"
        "2023-03-26 02:30,9.0\n"
        "2023-03-26 03:00,3.0\n"
        "2023-03-26 03:30,4.0\n"
        "2023-03-26 04:00,5.0\n")),
    # Cumulative energy counter in kWh (rollover at 10000 kWh) with one rollover and one reset,
    # UTC, interval-end labels, 15-min steps, INV1 rated 100 kW.
    "d_counter.csv": ("utf-8", (
        "Time,INV1_E\n"
        "2023-06-04 10:00,9990.0\n"
        "2023-06-04 10:15,9995.0\n"
        "2023-06-04 10:30,2.0\n"
        "2023-06-04 10:45,10.0\n"
        "2023-06-04 11:00,0.5\n"
        "2023-06-04 11:15,5.5\n")),
    # Interval changes from 15 to 5 minutes, UTC, interval-end labels.
    "d_interval_change.csv": ("utf-8", (
        "Time,INV1_PAC\n"
        "2023-06-05 10:00,10\n"
        "2023-06-05 10:15,11\n"
        "2023-06-05 10:30,12\n"
        "2023-06-05 10:35,13\n"
        "2023-06-05 10:40,14\n"
        "2023-06-05 10:45,15\n")),
    # A logger clock one hour ahead between 10:00 and 10:30 (its own time), UTC, start labels;
    # the site config's clock_corrections shift those rows by -60 min.
    "d_clock.csv": ("utf-8", (
        "Time,INV1_PAC\n"
        "2023-06-06 10:00,20\n"
        "2023-06-06 10:15,21\n"
        "2023-06-06 10:30,22\n"
        "2023-06-06 10:45,23\n"
        "2023-06-06 11:00,24\n")),
    # Long layout (one value per line), UTC, interval-start labels, units per line.
    "d_long.csv": ("utf-8", (
        "time,device,signal,value,unit\n"
        "2023-06-07 10:00,INV1,PAC,50000,W\n"
        "2023-06-07 10:00,INV2,PAC,51,kW\n"
        "2023-06-07 10:00,POA1,GPOA,800,W/m2\n"
        "2023-06-07 10:15,INV1,PAC,52000,W\n"
        "2023-06-07 10:15,INV9,PAC,1,kW\n"
        "2023-06-07 10:15,POA1,GPOA,bad,W/m2\n")),
}


def main() -> None:
    for name, (enc, text) in FILES.items():
        path = HERE / name
        if enc == "gzip":
            path.write_bytes(gzip.compress(text.encode("utf-8"), mtime=0))
        else:
            path.write_bytes(text.encode(enc))


if __name__ == "__main__":
    main()
