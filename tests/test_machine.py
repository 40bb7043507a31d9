"""What the process may use: the memory headroom under a control-group limit and MemAvailable.

The file formats are those of the Linux kernel's documentation (Documentation/admin-guide/
cgroup-v2.rst: memory.max holds a byte count or "max"; Documentation/filesystems/proc.rst:
/proc/meminfo lines "MemAvailable: <kB> kB").
"""

from ped2g import machine


def test_cgroup_headroom_is_limit_minus_use(tmp_path):
    limit, usage = tmp_path / "memory.max", tmp_path / "memory.current"
    limit.write_text("8589934592\n")          # an 8 GiB job
    usage.write_text("1073741824\n")          # 1 GiB already used
    assert machine._cgroup_headroom(((str(limit), str(usage)),)) == 7 * 2 ** 30
    limit.write_text("max\n")                 # no limit set
    assert machine._cgroup_headroom(((str(limit), str(usage)),)) is None
    # the first readable pair decides; unreadable pairs are skipped
    assert machine._cgroup_headroom(((str(tmp_path / "absent"), str(usage)),)) is None


def test_meminfo_available_is_read_in_kibibytes(tmp_path):
    meminfo = tmp_path / "meminfo"
    meminfo.write_text("MemTotal:       24576000 kB\nMemFree:         1000 kB\nMemAvailable:   20000000 kB\n")
    assert machine._meminfo_available(str(meminfo)) == 20000000 * 1024.0
    meminfo.write_text("MemTotal: 1 kB\n")
    assert machine._meminfo_available(str(meminfo)) is None


def test_available_memory_is_the_smaller_bound(monkeypatch):
    monkeypatch.setattr(machine, "_meminfo_available", lambda: 20e9)
    monkeypatch.setattr(machine, "_cgroup_headroom", lambda: 4e9)
    assert machine.available_memory() == 4e9
    monkeypatch.setattr(machine, "_cgroup_headroom", lambda: None)
    assert machine.available_memory() == 20e9
    monkeypatch.setattr(machine, "_meminfo_available", lambda: None)
    assert machine.available_memory() is None
