using StackBuild.Numerics;
using Xunit;

namespace StackBuild.Tests;

/// <summary>
/// FFTW's plan file is read and written only when a program's entry point asks (<see cref="FftPlanCache"/>), never by
/// planning itself (docs/architecture.md, "Where I/O happens").
/// </summary>
public class FftPlanCacheTests
{
    [Fact]
    public void PlansAreSavedOnlyWhenAskedAndReadBack()
    {
        if (Fft2D.DefaultProvider != FftProvider.Fftw) return; // the managed FFT has no plans to keep (tests/run.sh installs FFTW)
        var folder = Directory.CreateTempSubdirectory("sb-wisdom-").FullName;
        try
        {
            var path = Path.Combine(folder, "sub", "wisdom");
            // A size no other test uses, so this process has made a plan that was not yet saved.
            using (var data = new ComplexImage(37, 23)) Fft2D.Create(37, 23).Forward(data);
            Assert.False(File.Exists(path)); // planning wrote nothing
            Assert.True(FftPlanCache.Save(path));
            Assert.True(new FileInfo(path).Length > 0);
            Assert.Empty(Directory.GetFiles(Path.GetDirectoryName(path)!, "*.part")); // written through a temporary and a rename
            Assert.True(FftPlanCache.Load(path));
            Assert.False(FftPlanCache.Load(Path.Combine(folder, "none")));
        }
        finally { Directory.Delete(folder, true); }
    }

    [Fact]
    public void ASaveKeepsThePlansAnotherRunSavedMeanwhile()
    {
        // Two runs share the plan file: the first saves plans for one size; the second, which read the file before that
        // (here: FFTW's wisdom forgotten) and plans another size, saves after it. The file must then hold both, or the next
        // build at the first size measures its plan again and may round differently (a test comparing two builds failed
        // that way once while another build ran).
        if (Fft2D.DefaultProvider != FftProvider.Fftw) return; // the managed FFT has no plans to keep (tests/run.sh installs FFTW)
        var folder = Directory.CreateTempSubdirectory("sb-wisdom-").FullName;
        try
        {
            var path = Path.Combine(folder, "wisdom");
            using (var data = new ComplexImage(41, 29)) Fft2D.Create(41, 29).Forward(data);   // sizes no other test uses
            Assert.True(FftPlanCache.Save(path));
            Fftw.ForgetWisdom();
            Assert.False(Fftw.HasWisdomFor(41, 29));
            using (var data = new ComplexImage(43, 31)) Fft2D.Create(43, 31).Forward(data);
            Assert.True(FftPlanCache.Save(path));
            Fftw.ForgetWisdom();
            Assert.True(FftPlanCache.Load(path));
            Assert.True(Fftw.HasWisdomFor(43, 31));
            Assert.True(Fftw.HasWisdomFor(41, 29), "the second save dropped the plans the first had saved");
        }
        finally { Directory.Delete(folder, true); }
    }
}
