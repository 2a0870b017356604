"""Measuring the real rig: audio devices, the play-and-record seam, the take loop, calibration.

Importing this package (or any of its modules) never loads PortAudio:
sounddevice is imported inside the functions that need it.  Channels are
0-based in this API and 1-based in rig files, calibration records and on
the command line.  Time signals are (n_samples, n_channels), full scale 1.

Devices (:mod:`.devices`)
    list_devices() -> [DeviceInfo]               index, name, host API, channels, default rate
    list_host_apis() -> [HostApiInfo]
    choose_device(spec, n_inputs=, n_outputs=) -> DeviceInfo
                                                 by index or name substring; DeviceError lists
                                                 candidates when ambiguous, or too few channels
    check_stream_settings(device, rate, n_in, n_out)   DeviceError for an unsupported rate
    format_device_table(devices, apis)           the ``arrayplan devices`` listing

Play and record (:mod:`.duplex`)
    AudioLink                                    the interface: sample_rate_hz, n_outputs, n_inputs,
                                                 play_record(signal, out_channels, in_channels)
    SoundDeviceLink(device, rate, n_outputs=, n_inputs=)   real hardware, one duplex stream per call,
                                                 fades out and re-raises on Ctrl-C
    DuplexResult                                 .recording (n, n_in), xrun flags, .xrun, .flag_texts()

Simulated rig (:mod:`.simulated`)
    SimulatedLink(truth_irset, speaker_outputs, mic_inputs, latency_samples=, noise_rms_dbfs=,
                  nonlinearity=, reference=, dropouts_per_take=)
    SimulatedLink.from_rig(rig, rate, n_ir_samples)      free-field truth from arrayplan.kernels.model_irs
    apply_nonlinearity(x, (a2, a3, ...))

Measurement (:mod:`.measure`)
    MeasurementSettings(f1_hz, f2_hz, sweep_s, peak_dbfs, ir_s, repeats, ...)
    RigWiring.from_rig(rig)                      names and 0-based channels, reference loop
    measure(link, wiring, out_dir, settings, calibration=) -> MeasurementSummary
                                                 one take per speaker, saved atomically, resumable
    estimate_latency(reference_recording, sweep, max_latency_samples) -> (int, float, peak)
    completed_takes(out_dir)

Calibration records (:mod:`.calibration`; format in calibration/README.md)
    read_calibration(path) -> CalibrationRecord; write_calibration(path, record)
    mic_from_calibrator_recording(wav, channel, name, input_full_scale_vrms=, ...) -> MicCalibration
    output_from_loopback_recording(wav, channel, output_channel, played_peak=, ...) -> OutputCalibration
    LatencyCalibration(samples, sample_rate_hz, ...)
    calibration_factors(record, mic_names, mic_channels, speaker_channels) -> Pa/FS, V/FS, units
    pressure_from_db_spl(94) -> 1.002 Pa; sensitivity_db_re_1v_per_pa(mV/Pa); dbu_to_vrms(dBu)
"""

from ..formats.calibration_record import (CalibrationRecord, LatencyCalibration, MicCalibration, OutputCalibration,
                                          read_calibration, write_calibration)
from .calibration import (calibration_factors, dbu_to_vrms, mic_from_calibrator_recording,
                          output_from_loopback_recording, pressure_from_db_spl, sensitivity_db_re_1v_per_pa)
from .devices import (DeviceInfo, HostApiInfo, check_stream_settings, choose_device, format_device_table,
                      list_devices, list_host_apis)
from .duplex import AudioLink, DuplexResult, SoundDeviceLink
from .measure import (MeasurementSettings, MeasurementSummary, RigWiring, TakeResult, completed_takes,
                      estimate_latency, measure)
from .simulated import SimulatedLink, apply_nonlinearity

__all__ = [
    "CalibrationRecord", "LatencyCalibration", "MicCalibration", "OutputCalibration", "calibration_factors",
    "dbu_to_vrms", "mic_from_calibrator_recording", "output_from_loopback_recording", "pressure_from_db_spl",
    "read_calibration", "sensitivity_db_re_1v_per_pa", "write_calibration",
    "DeviceInfo", "HostApiInfo", "check_stream_settings", "choose_device", "format_device_table",
    "list_devices", "list_host_apis",
    "AudioLink", "DuplexResult", "SoundDeviceLink",
    "MeasurementSettings", "MeasurementSummary", "RigWiring", "TakeResult", "completed_takes",
    "estimate_latency", "measure",
    "SimulatedLink", "apply_nonlinearity",
]
