% Tones of a recording from MATLAB through the jetloop Python package (not run in CI: no
% MATLAB on the build machines). Needs: pyenv('Version', '/path/to/python') with
% `pip install ./clients/python` done in that Python, and a running jetloop server.
fs = 51200;                                   % sample rate, Hz
t = (0:fs-1)' / fs;
x = sqrt(2) * sin(2*pi*4000*t);               % 1 Pa rms tone, in pascals
np = py.importlib.import_module('numpy');
jc = py.importlib.import_module('jetloop_client');
c = jc.Client('127.0.0.1:50051');
r = c.extract_tones(np.array(x), fs, jc.Calibration.pascals());
ch = r.channels{1};
for k = 1:int64(py.len(ch.tones))
    tone = ch.tones{k};
    fprintf('%9.1f Hz  %6.1f dB re 20 uPa\n', tone.frequency_hz, tone.level_db);
end
c.close();
