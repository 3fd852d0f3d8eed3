"""Rebuild inputs_demo/lindmark.xlsx from the seeded generator in allocator.demo_network."""

from pathlib import Path

from allocator.demo_network import write_demo_workbook

if __name__ == "__main__":
    print(f"wrote {write_demo_workbook(Path(__file__).resolve().parent)}")
