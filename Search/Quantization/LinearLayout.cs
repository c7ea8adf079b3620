namespace Bitbudget.Search.Quantization;

/// <summary>
/// A layer weight seen as the matrix of a linear map y = W x: <see cref="Groups"/> independent blocks of
/// <see cref="Rows"/> outputs by <see cref="Columns"/> inputs (Conv with group &gt; 1 has one block per group;
/// everything else one). <see cref="RowMajor"/> weights keep a row's columns together (Conv [M, C/g, k...] flattened
/// per output channel, Gemm with transB = 1, recurrent W [directions, gates*hidden, input]); the others are
/// stored [Columns, Rows] (MatMul B [K, N], Gemm with transB = 0).
/// </summary>
public readonly record struct LinearLayout(int Groups, int Rows, int Columns, bool RowMajor)
{
    /// <summary>Number of weight values the layout covers.</summary>
    public long Count => (long)Groups * Rows * Columns;

    /// <summary>Position in the weight's C-order values of output <paramref name="row"/>, input <paramref name="column"/> of block <paramref name="group"/>.</summary>
    public int Index(int group, int row, int column) => RowMajor
        ? (((group * Rows) + row) * Columns) + column
        : (column * Rows) + row;

    /// <summary>The output unit (bias entry) of a row of a block.</summary>
    public int Output(int group, int row) => (group * Rows) + row;
}
