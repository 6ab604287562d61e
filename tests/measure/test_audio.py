"""howl.audio: device choice, the fake backend, a clear error without PortAudio."""

from __future__ import annotations

import builtins
import subprocess
import sys

import numpy as np
import pytest

from howl.measure.audio import DeviceInfo, FakeBackend, PlaybackInterrupted, _resolve_in, import_sounddevice
from howl.errors import AudioUnavailableError, InputError

DEVS = [
    DeviceInfo(0, "system", "JACK Audio Connection Kit", 2, 2, 48000.0),
    DeviceInfo(1, "loopback", "JACK Audio Connection Kit", 2, 2, 48000.0),
    DeviceInfo(2, "USB Mic", "ALSA", 1, 0, 44100.0),
]


def test_device_is_found_by_words_of_name_and_host_api():
    # sounddevice's rule: every space/comma-separated word must occur in "name, host API"
    assert _resolve_in(DEVS, "loopback, JACK", "both").index == 1
    assert _resolve_in(DEVS, "usb", "input").index == 2
    assert _resolve_in(DEVS, "1", "output").name == "loopback"


def test_ambiguous_missing_or_one_way_devices_are_refused_with_the_list():
    with pytest.raises(InputError, match="several devices"):
        _resolve_in(DEVS, "JACK", "both")
    with pytest.raises(InputError, match="no duplex device matches"):
        _resolve_in(DEVS, "nothing", "both")
    with pytest.raises(InputError, match="no output channels"):
        _resolve_in(DEVS, 2, "output")
    with pytest.raises(InputError, match="--device"):
        _resolve_in(DEVS, None, "both")


def test_missing_portaudio_is_one_clear_error_naming_the_package(monkeypatch):
    real_import = builtins.__import__

    def fake_import(name, *args, **kwargs):
        if name == "sounddevice":
            raise OSError("PortAudio library not found")  # what sounddevice raises without libportaudio2
        return real_import(name, *args, **kwargs)

    monkeypatch.delitem(sys.modules, "sounddevice", raising=False)
    monkeypatch.setattr(builtins, "__import__", fake_import)
    with pytest.raises(AudioUnavailableError, match="apt-get install libportaudio2"):
        import_sounddevice()


def test_importing_audio_does_not_import_sounddevice():
    code = "import howl.measure.audio, sys; print('sounddevice' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def _fake(**kw):
    h = np.zeros(50)
    h[10] = 0.5
    h[30] = -0.25
    return FakeBackend({(1, 1): h, (2, 2): np.array([1.0])}, sample_rate_hz=8000, latency_samples=7,
                       noise_rms=0.0, **kw)


def test_fake_backend_convolves_with_its_ir_after_the_latency():
    fb = _fake()
    x = np.zeros((200, 2))
    x[0, 0] = 1.0
    x[5, 1] = 0.5
    res = fb.play_record(x, sample_rate_hz=8000, output_device=fb.device, input_device=fb.device,
                         output_channels=[1, 2], input_channels=[1, 2])
    assert res.recording[17, 0] == pytest.approx(0.5)
    assert res.recording[37, 0] == pytest.approx(-0.25)
    assert res.recording[12, 1] == pytest.approx(0.5)
    assert not res.dropout


def test_fake_backend_reports_dropouts_and_refuses_bad_channels_and_rates():
    fb = _fake(dropout_calls=(1,))
    x = np.zeros((4000, 1))
    res = fb.play_record(x, sample_rate_hz=8000, output_device=fb.device, input_device=fb.device,
                         output_channels=[1], input_channels=[1])
    assert res.dropout and "input_overflow" in res.status_flags
    with pytest.raises(InputError, match="--in-channel"):
        fb.play_record(x, sample_rate_hz=8000, output_device=fb.device, input_device=fb.device,
                       output_channels=[1], input_channels=[3])
    with pytest.raises(AudioUnavailableError, match="44100"):
        fb.play_record(x, sample_rate_hz=44100, output_device=fb.device, input_device=fb.device,
                       output_channels=[1], input_channels=[1])


def test_fake_interrupt_keeps_the_frames_recorded_so_far():
    fb = _fake(interrupt_call=1, interrupt_frame=100)
    x = np.ones((400, 1)) * 0.1
    with pytest.raises(PlaybackInterrupted) as info:
        fb.play_record(x, sample_rate_hz=8000, output_device=fb.device, input_device=fb.device,
                       output_channels=[1], input_channels=[1])
    assert info.value.result.n_frames_done == 100
    assert isinstance(info.value, KeyboardInterrupt)
