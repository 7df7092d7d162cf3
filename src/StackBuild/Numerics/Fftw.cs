using System.Runtime.InteropServices;
using MathNet.Numerics;

namespace StackBuild.Numerics;

/// <summary>
/// FFTW 3 single precision (Debian libfftw3-single3) through P/Invoke. One forward and one inverse plan per
/// size, made once with FFTW_MEASURE under a lock (FFTW's planner is not thread-safe) and kept for the life of
/// the process; transforms run with <c>fftwf_execute_dft</c> on the caller's aligned buffers, which is
/// thread-safe. Planning touches no file: the program's edge loads and saves FFTW's wisdom (<see cref="FftPlanCache"/>)
/// so later runs plan instantly.
/// </summary>
internal static unsafe class Fftw
{
    // The versioned name: the unversioned one only resolves when libfftw3-dev is installed (NOTES.md).
    internal const string LibraryName = "libfftw3f.so.3";
    private const int ForwardSign = -1, BackwardSign = 1;
    private const uint Measure = 0;
    private const uint WisdomOnly = 1u << 21; // FFTW_WISDOM_ONLY (fftw3.h)

    private static readonly Lock PlannerLock = new();
    private static readonly Dictionary<(int W, int H), (nint Forward, nint Inverse)> Plans = [];
    private static int _plansSinceExport;
    private static readonly Lazy<(bool Ok, string Version)> Probe = new(ProbeLibrary);

    public static bool IsAvailable => Probe.Value.Ok;

    public static string Description => $"FFTW ({Probe.Value.Version}, {LibraryName})";

    private static (bool, string) ProbeLibrary()
    {
        if (!NativeLibrary.TryLoad(LibraryName, typeof(Fftw).Assembly, null, out var handle)) return (false, "");
        string version = NativeLibrary.TryGetExport(handle, "fftwf_version", out var p) ? Marshal.PtrToStringAnsi(p) ?? "fftw-3" : "fftw-3";
        return (true, version);
    }

    public static IFft2D Create(int width, int height)
    {
        var (forward, inverse) = GetPlans(width, height);
        return new FftwFft2D(width, height, forward, inverse);
    }

    private static (nint, nint) GetPlans(int width, int height)
    {
        lock (PlannerLock)
        {
            if (Plans.TryGetValue((width, height), out var plans)) return plans;
            // FFTW_MEASURE overwrites the arrays while planning: plan on scratch buffers first, fill later.
            using var scratch = new ComplexImage(width, height);
            nint f = fftwf_plan_dft_2d(height, width, scratch.Pointer, scratch.Pointer, ForwardSign, Measure);
            nint b = fftwf_plan_dft_2d(height, width, scratch.Pointer, scratch.Pointer, BackwardSign, Measure);
            if (f == 0 || b == 0) throw new InvalidOperationException($"FFTW could not plan a {width}×{height} transform.");
            Plans[(width, height)] = (f, b);
            _plansSinceExport++;
            return (f, b);
        }
    }

    /// <summary>Adds the wisdom in the file at <paramref name="path"/> to FFTW's; false when there is none or it cannot be read.</summary>
    internal static bool ImportWisdom(string path)
    {
        if (!IsAvailable || !File.Exists(path)) return false;
        lock (PlannerLock) return fftwf_import_wisdom_from_filename(path) != 0;
    }

    /// <summary>
    /// Writes FFTW's wisdom to <paramref name="path"/> (through a temporary file and a rename) when plans were made since
    /// the last export; false when nothing was written. I/O failures are the caller's.
    /// </summary>
    internal static bool ExportWisdom(string path)
    {
        if (!IsAvailable) return false;
        lock (PlannerLock)
        {
            if (_plansSinceExport == 0) return false;
            Directory.CreateDirectory(Path.GetDirectoryName(Path.GetFullPath(path))!);
            // Plans that another run saved there since this one read the file (a build of other sizes that ended first) are
            // taken in first, so this save keeps them: otherwise the next build at those sizes measures them again, may pick
            // another algorithm and round differently (docs/architecture.md, "FFT plans"). Plans already made here stay.
            if (File.Exists(path)) fftwf_import_wisdom_from_filename(path);
            var temp = $"{path}.{Environment.ProcessId}.part";
            if (fftwf_export_wisdom_to_filename(temp) == 0) { File.Delete(temp); return false; }
            File.Move(temp, path, overwrite: true);
            _plansSinceExport = 0;
            return true;
        }
    }

    /// <summary>Forgets every plan FFTW knows as wisdom (plans already made here are kept); for tests.</summary>
    internal static void ForgetWisdom()
    {
        lock (PlannerLock) fftwf_forget_wisdom();
    }

    /// <summary>True when FFTW holds wisdom for the in-place forward transform of this size (FFTW_WISDOM_ONLY); for tests.</summary>
    internal static bool HasWisdomFor(int width, int height)
    {
        lock (PlannerLock)
        {
            using var scratch = new ComplexImage(width, height);
            nint plan = fftwf_plan_dft_2d(height, width, scratch.Pointer, scratch.Pointer, ForwardSign, Measure | WisdomOnly);
            if (plan == 0) return false;
            fftwf_destroy_plan(plan);
            return true;
        }
    }

    private sealed class FftwFft2D(int width, int height, nint forward, nint inverse) : IFft2D
    {
        public int Width => width;
        public int Height => height;
        public string ProviderName => Description;

        public void Forward(ComplexImage data)
        {
            Check(data);
            fftwf_execute_dft(forward, data.Pointer, data.Pointer);
        }

        public void Inverse(ComplexImage data)
        {
            Check(data);
            fftwf_execute_dft(inverse, data.Pointer, data.Pointer);
            float scale = 1f / (width * height);
            var s = data.Span;
            for (int i = 0; i < s.Length; i++) s[i] *= scale;
        }

        private void Check(ComplexImage data)
        {
            if (data.Width != width || data.Height != height)
                throw new ArgumentException($"This FFT is for {width}×{height}, not {data.Width}×{data.Height}.");
        }
    }

    [DllImport(LibraryName)]
    private static extern nint fftwf_plan_dft_2d(int n0, int n1, Complex32* input, Complex32* output, int sign, uint flags);

    [DllImport(LibraryName)]
    private static extern void fftwf_forget_wisdom();

    [DllImport(LibraryName)]
    private static extern void fftwf_destroy_plan(nint plan);

    [DllImport(LibraryName)]
    private static extern void fftwf_execute_dft(nint plan, Complex32* input, Complex32* output);

    [DllImport(LibraryName, BestFitMapping = false, ThrowOnUnmappableChar = true)]
    private static extern int fftwf_import_wisdom_from_filename([MarshalAs(UnmanagedType.LPStr)] string path);

    [DllImport(LibraryName, BestFitMapping = false, ThrowOnUnmappableChar = true)]
    private static extern int fftwf_export_wisdom_to_filename([MarshalAs(UnmanagedType.LPStr)] string path);
}
