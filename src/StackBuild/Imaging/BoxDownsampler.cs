namespace StackBuild.Imaging;

/// <summary>
/// Receives an image row by row (top to bottom) and keeps the mean of each factor × factor block of pixels
/// (area averaging; a box filter over whole blocks). Blocks at the right and bottom edge that are cut short
/// average only the pixels that exist, so the mean of the image is kept up to those edge weights. With factor
/// 1 the rows are copied as they are. Memory: the output plus one row of sums.
/// </summary>
internal sealed class BoxDownsampler
{
    private readonly int width, height, factor;
    private readonly GrayImage output;
    private readonly double[] sums;
    private int rowsInBlock, outputRow;

    /// <param name="reuse">An array to take as the output's pixels when it holds exactly as many (every pixel is written).</param>
    public BoxDownsampler(int width, int height, int factor, float[]? reuse = null)
    {
        if (width <= 0 || height <= 0) throw new ArgumentOutOfRangeException(nameof(width));
        if (factor < 1) throw new ArgumentOutOfRangeException(nameof(factor));
        this.width = width;
        this.height = height;
        this.factor = factor;
        int outWidth = (width + factor - 1) / factor, outHeight = (height + factor - 1) / factor;
        output = new GrayImage(outWidth, outHeight, reuse?.Length == (long)outWidth * outHeight ? reuse : null);
        sums = factor == 1 ? [] : new double[output.Width];
    }

    /// <summary>The full-resolution image's width and height.</summary>
    public int Width => width;
    public int Height => height;

    /// <summary>How many full-resolution rows have been received.</summary>
    public int RowsSeen { get; private set; }

    public void Accept(ReadOnlySpan<float> row)
    {
        if (row.Length != width) throw new ArgumentException($"Expected a row of {width} pixels, got {row.Length}.", nameof(row));
        if (RowsSeen >= height) throw new InvalidOperationException("More rows than the image height.");
        RowsSeen++;
        if (factor == 1)
        {
            row.CopyTo(output.Row(outputRow++));
            return;
        }
        for (int bx = 0, x0 = 0; bx < sums.Length; bx++, x0 += factor)
        {
            var block = row.Slice(x0, Math.Min(factor, width - x0));
            double s = 0;
            foreach (float v in block) s += v;
            sums[bx] += s;
        }
        if (++rowsInBlock == factor || RowsSeen == height) FlushBlockRow();
    }

    public GrayImage Finish()
    {
        if (RowsSeen != height) throw new InvalidOperationException($"Received {RowsSeen} of {height} rows.");
        return output;
    }

    private void FlushBlockRow()
    {
        var target = output.Row(outputRow++);
        for (int bx = 0; bx < sums.Length; bx++)
        {
            int columns = Math.Min(factor, width - bx * factor);
            target[bx] = (float)(sums[bx] / (columns * rowsInBlock));
            sums[bx] = 0;
        }
        rowsInBlock = 0;
    }
}
