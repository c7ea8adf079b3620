namespace Bitbudget.Search.Quantization;

/// <summary>
/// First and second moments of a linear layer's input vectors on the calibration set, per block of a
/// <see cref="LinearLayout"/>: the sum of x and the sum of x xᵀ, accumulated in double. They are all that
/// compensated rounding (H = 2 Σ x xᵀ) and bias correction (E[x]) need, so the inputs themselves are never kept:
/// memory is Groups x Columns² doubles whatever the calibration set's size. Bias correction alone needs only Σ x: without
/// <see cref="HasSecondMoments"/> the products are neither summed nor kept (Groups x Columns doubles).
/// </summary>
public sealed class InputMoments
{
    private readonly double[][] _secondMoments;
    private readonly double[][] _sums;
    private readonly long[] _counts;

    public InputMoments(int groups, int columns, bool secondMoments = true)
    {
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(groups);
        ArgumentOutOfRangeException.ThrowIfNegativeOrZero(columns);
        Groups = groups;
        Columns = columns;
        HasSecondMoments = secondMoments;
        _secondMoments = Enumerable.Range(0, groups).Select(_ => secondMoments ? new double[(long)columns * columns] : []).ToArray();
        _sums = Enumerable.Range(0, groups).Select(_ => new double[columns]).ToArray();
        _counts = new long[groups];
    }

    public int Groups { get; }

    /// <summary>Whether Σ x xᵀ is gathered (compensated rounding needs it; bias correction does not).</summary>
    public bool HasSecondMoments { get; }

    /// <summary>Length of one input vector.</summary>
    public int Columns { get; }

    /// <summary>Input vectors seen by block <paramref name="group"/>.</summary>
    public long Count(int group) => _counts[group];

    /// <summary>Σ x xᵀ of block <paramref name="group"/>, row-major Columns x Columns (both triangles filled).</summary>
    public ReadOnlySpan<double> SecondMoment(int group) =>
        HasSecondMoments ? _secondMoments[group] : throw new InvalidOperationException("These moments were gathered without Σ x xᵀ.");

    /// <summary>Σ x of block <paramref name="group"/>.</summary>
    public ReadOnlySpan<double> Sum(int group) => _sums[group];

    /// <summary>E[x] of block <paramref name="group"/> (zeros before any input was added).</summary>
    public double[] Mean(int group) => _counts[group] == 0 ? new double[Columns] : Array.ConvertAll(_sums[group], s => s / _counts[group]);

    /// <summary>Bytes the moments of a layer with these dimensions take.</summary>
    public static long BytesFor(int groups, int columns, bool secondMoments = true) =>
        (long)groups * ((secondMoments ? (long)columns * columns : 0) + columns) * sizeof(double);

    /// <summary>
    /// Adds <paramref name="count"/> input vectors of block <paramref name="group"/>, given column by column:
    /// <paramref name="columnsMajor"/>[c * <paramref name="stride"/> + v] is value c of vector v. Sums are in double.
    /// </summary>
    public void Add(int group, ReadOnlySpan<float> columnsMajor, int count, int stride)
    {
        if (count == 0)
        {
            return;
        }

        if (stride < count || columnsMajor.Length < ((long)(Columns - 1) * stride) + count)
        {
            throw new ArgumentException("The input block is shorter than Columns x count.", nameof(columnsMajor));
        }

        // Products are summed in double: a float sum over thousands of patches would lose the small eigenvalues that
        // the inverse of H is most sensitive to.
        var block = new double[(long)Columns * count];
        for (var c = 0; c < Columns; c++)
        {
            System.Numerics.Tensors.TensorPrimitives.ConvertChecked<float, double>(columnsMajor.Slice(c * stride, count), block.AsSpan(c * count, count));
        }

        var h = _secondMoments[group];
        var sum = _sums[group];
        for (var i = 0; i < Columns; i++)
        {
            var xi = block.AsSpan(i * count, count);
            sum[i] += System.Numerics.Tensors.TensorPrimitives.Sum<double>(xi);
            for (var j = i; HasSecondMoments && j < Columns; j++)
            {
                var dot = System.Numerics.Tensors.TensorPrimitives.Dot<double>(xi, block.AsSpan(j * count, count));
                h[((long)i * Columns) + j] += dot;
                if (j != i)
                {
                    h[((long)j * Columns) + i] += dot;
                }
            }
        }

        _counts[group] += count;
    }
}
