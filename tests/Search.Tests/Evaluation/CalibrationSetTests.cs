using Bitbudget.Search.Evaluation;
using static Bitbudget.Search.Tests.Evaluation.DatasetTestData;

namespace Bitbudget.Search.Tests.Evaluation;

public class CalibrationSetTests
{
    private static readonly ValueDescription Image = new("x", ElementType.Float32, [null, 3, 4, 5]);
    private static readonly ValueDescription Mask = new("mask", ElementType.Int64, [null, 4]);

    private static NpyArray Images(long samples, string name = "x") => Floats(name, [samples, 3, 4, 5], i => i * 0.5f - 7);

    private static NpyArray Masks(long samples) =>
        new("mask", ElementType.Int64, [samples, 4], Enumerable.Range(0, (int)samples * 4).Select(i => (long)i).ToArray());

    private static NpyArray Labels(params long[] values) => new("labels", ElementType.Int64, [values.Length], values);

    [Fact]
    public void ArraysMapToInputsByNameInTheModelsOrderWithLabels()
    {
        var set = CalibrationSet.Create([Labels(2, 0, 1), Masks(3), Images(3)], [Image, Mask]);

        Assert.Equal(3, set.SampleCount);
        Assert.Equal(["x", "mask"], set.Inputs.Select(a => a.Name));
        Assert.Equal([2L, 0, 1], set.Labels);
        Assert.Null(set.SamplesPerRun);
    }

    [Fact]
    public void NumpyWrittenNpzWithLabelsFitsAModel()
    {
        // compressed.npz: np.savez_compressed(x=float32 (2,3,4), labels=int64 [1, 0]) by make_fixtures.py.
        var arrays = DatasetReader.Read(File.ReadAllBytes(Fixture("compressed.npz")));

        var set = CalibrationSet.Create(arrays, [new ValueDescription("x", ElementType.Float32, [-1, 3, 4])]);

        Assert.Equal(2, set.SampleCount);
        Assert.Equal([1L, 0], set.Labels);
    }

    [Fact]
    public void SingleNpyFeedsTheModelsOnlyInputWhateverItsName()
    {
        var arrays = DatasetReader.Read(NpyBytes(Images(2)));

        var set = CalibrationSet.Create(arrays, [Image]);

        Assert.Equal("x", Assert.Single(set.Inputs).Name);
        Assert.Null(set.Labels);
        var multi = Refused(() => CalibrationSet.Create(arrays, [Image, Mask]), "dataset-mismatch");
        Assert.Contains("no array 'x'", multi.Message);
    }

    [Fact]
    public void MissingArrayIsNamedWithTheInputsTypeAndShapeAndWhatTheDatasetHas()
    {
        var input = new ValueDescription("x", ElementType.Float32, [null, 3, 48, 192]);

        var e = Refused(() => CalibrationSet.Create([Masks(2), Labels(0, 1)], [input]), "dataset-mismatch");

        Assert.Equal("The dataset has no array 'x' for model input 'x' (float32, [?,3,48,192]); it has: mask, labels.", e.Message);
    }

    [Fact]
    public void UnknownArrayIsRefusedSoATypoCannotDropData()
    {
        var e = Refused(() => CalibrationSet.Create([Images(2), Images(2, "maks")], [Image]), "dataset-mismatch");

        Assert.Contains("'maks'", e.Message);
        Assert.Contains("inputs are: x", e.Message);
    }

    [Fact]
    public void ElementTypeMismatchSaysBothTypes()
    {
        var ints = new NpyArray("x", ElementType.Int32, [2, 3, 4, 5], new int[120]);
        var wrongMask = new NpyArray("mask", ElementType.Int32, [2, 4], new int[8]);

        Assert.Contains("holds int32 but model input 'x' takes float32", Refused(() => CalibrationSet.Create([ints], [Image]), "dataset-mismatch").Message);
        Assert.Contains("holds int32 but model input 'mask' takes int64", Refused(() => CalibrationSet.Create([Images(2), wrongMask], [Image, Mask]), "dataset-mismatch").Message);
    }

    [Fact]
    public void Float16AndFloat64AreConvertedForAFloat32Input()
    {
        var source = Images(2);
        var f = (float[])source.Data;
        var half = source with { ElementType = ElementType.Float16, Data = f.Select(v => (Half)v).ToArray() };
        var dbl = source with { ElementType = ElementType.Float64, Data = f.Select(v => (double)v).ToArray() };

        foreach (var array in new[] { half, dbl })
        {
            var input = Assert.Single(CalibrationSet.Create([array], [Image]).Inputs);
            Assert.Equal(ElementType.Float32, input.ElementType);
            Assert.Equal(f, (float[])input.Data);
        }
    }

    [Fact]
    public void RankAndFixedDimensionMismatchesNameTheAxis()
    {
        var wrongAxis = Floats("x", [2, 3, 4, 6], i => i);
        var wrongRank = Floats("x", [2, 3, 20], i => i);

        var axis = Refused(() => CalibrationSet.Create([wrongAxis], [Image]), "dataset-mismatch");
        Assert.Contains("axis 3 is 6, the model needs 5", axis.Message);
        Assert.Contains("[2, 3, 4, 6]", axis.Message);
        Assert.Contains("rank 3 where the model needs rank 4", Refused(() => CalibrationSet.Create([wrongRank], [Image]), "dataset-mismatch").Message);
    }

    [Fact]
    public void DynamicDimensionsTakeAnySizeAndAFixedFirstAxisSetsSamplesPerRun()
    {
        var dynamic = new ValueDescription("x", ElementType.Float32, [null, 3, null, null]);
        Assert.Equal(5, CalibrationSet.Create([Floats("x", [5, 3, 7, 11], i => i)], [dynamic]).SampleCount);

        var batchOne = Image with { Shape = [1, 3, 4, 5] };
        var set = CalibrationSet.Create([Images(6)], [batchOne]);
        Assert.Equal(6, set.SampleCount);
        Assert.Equal(1, set.SamplesPerRun);

        var batchFour = Image with { Shape = [4, 3, 4, 5] };
        Assert.Contains("multiple of 4", Refused(() => CalibrationSet.Create([Images(6)], [batchFour]), "dataset-mismatch").Message);
        Assert.Equal(4, CalibrationSet.Create([Images(8)], [batchFour]).SamplesPerRun);
    }

    [Fact]
    public void AnArrayOfAFixedInputsWholeShapeIsAConstantWhenAnotherInputCarriesSamples()
    {
        var table = new ValueDescription("table", ElementType.Float32, [3, 2]);
        var tableArray = Floats("table", [3, 2], i => i);

        var withSamples = CalibrationSet.Create([Images(5), tableArray], [Image, table]);
        Assert.Equal([0, (int?)null], withSamples.SampleAxes);
        Assert.Equal(5, withSamples.SampleCount);
        Assert.Same(withSamples.Inputs[1].Data, withSamples.Slice(1, 2)[1].Data);

        // Alone, the same array is one run of samples for a model that fixes its batch: 3 samples of 2 values.
        var alone = CalibrationSet.Create([tableArray], [table]);
        Assert.Equal([(int?)0], alone.SampleAxes);
        Assert.Equal(3, alone.SampleCount);
        Assert.Equal(3, alone.SamplesPerRun);

        // A sample axis given outright makes it sampled even beside another sampled input.
        var given = Refused(() => CalibrationSet.Create([Images(5), tableArray], [Image, table], new Dictionary<string, int> { ["table"] = 0 }), "dataset-invalid");
        Assert.Contains("'table' has 3 on axis 0", given.Message);
    }

    [Fact]
    public void OneDynamicAxisIsTheSampleAxisWhereverItIs()
    {
        var state = new ValueDescription("state", ElementType.Float32, [2, null, 4]);

        var set = CalibrationSet.Create([Floats("state", [2, 7, 4], i => i)], [state]);

        Assert.Equal(1, set.SampleAxes[0]);
        Assert.Equal(7, set.SampleCount);
        Assert.Contains("axis 0 is 3, the model needs 2", Refused(() => CalibrationSet.Create([Floats("state", [3, 7, 4], i => i)], [state]), "dataset-mismatch").Message);
        Assert.Equal(0, CalibrationSet.DefaultSampleAxis(new ValueDescription("two", ElementType.Float32, [null, null])));
        Assert.Null(CalibrationSet.DefaultSampleAxis(new ValueDescription("rate", ElementType.Int64, [])));
    }

    [Fact]
    public void AModelOfScalarsOnlyCannotBeFed()
    {
        var rate = new ValueDescription("rate", ElementType.Int64, []);

        var e = Refused(() => CalibrationSet.Create([new NpyArray("rate", ElementType.Int64, [], new long[] { 16000 })], [rate]), "dataset-mismatch");

        Assert.Contains("Every model input is a scalar ('rate')", e.Message);
    }

    [Fact]
    public void ArraysThatDisagreeOnSampleCountAreInvalid()
    {
        var e = Refused(() => CalibrationSet.Create([Images(3), Masks(2)], [Image, Mask]), "dataset-invalid");

        Assert.Contains("'x' has 3 on axis 0, 'mask' has 2 on axis 0", e.Message);
    }

    [Fact]
    public void ZeroSamplesAreInvalid()
    {
        Assert.Contains("no samples", Refused(() => CalibrationSet.Create([Images(0)], [Image]), "dataset-invalid").Message);
    }

    [Fact]
    public void LabelsMustBeOneIntegerClassPerSample()
    {
        var floatLabels = new NpyArray("labels", ElementType.Float32, [2], new float[] { 0, 1 });
        var twoD = new NpyArray("labels", ElementType.Int64, [2, 1], new long[] { 0, 1 });

        Assert.Contains("holds float32", Refused(() => CalibrationSet.Create([Images(2), floatLabels], [Image]), "dataset-invalid").Message);
        Assert.Contains("1-D", Refused(() => CalibrationSet.Create([Images(2), twoD], [Image]), "dataset-invalid").Message);
        Assert.Contains("3 labels for 2 samples", Refused(() => CalibrationSet.Create([Images(2), Labels(0, 1, 2)], [Image]), "dataset-invalid").Message);
        Assert.Contains("-1 at index 1", Refused(() => CalibrationSet.Create([Images(2), Labels(0, -1)], [Image]), "dataset-invalid").Message);

        // uint8 labels above 127 stay positive (a byte[] must not be read as sbyte[]).
        var bytes = new NpyArray("labels", ElementType.UInt8, [2], new byte[] { 200, 3 });
        Assert.Equal([200L, 3], CalibrationSet.Create([Images(2), bytes], [Image]).Labels);
    }

    [Fact]
    public void ModelInputNamedLabelsTakesTheArray()
    {
        var labelsInput = new ValueDescription("labels", ElementType.Int64, [null]);

        var set = CalibrationSet.Create([Images(3), Labels(1, 2, 3)], [Image, labelsInput]);

        Assert.Null(set.Labels);
        Assert.Equal(["x", "labels"], set.Inputs.Select(a => a.Name));
    }

    [Fact]
    public void NanInNumpyWrittenArrayIsReportedWithItsIndex()
    {
        // nan.npz: x = arange(24).reshape(4, 2, 3) with x[3, 1, 2] = NaN, written by NumPy (make_fixtures.py).
        var arrays = DatasetReader.Read(File.ReadAllBytes(Fixture("nan.npz")));
        var input = new ValueDescription("x", ElementType.Float32, [null, 2, 3]);

        var e = Refused(() => CalibrationSet.Create(arrays, [input]), "dataset-non-finite");

        Assert.Contains("Array 'x' holds NaN at index [3, 1, 2]", e.Message);
    }

    [Theory]
    [InlineData(0, float.PositiveInfinity, "+infinity at index [0, 0, 0, 0]")]
    [InlineData(59, float.NegativeInfinity, "-infinity at index [0, 2, 3, 4]")]
    [InlineData(60, float.NaN, "NaN at index [1, 0, 0, 0]")]
    [InlineData(119, float.NaN, "NaN at index [1, 2, 3, 4]")]
    public void NonFiniteValuesAreReportedWithTheirIndex(int flat, float value, string said)
    {
        var images = Images(2);
        ((float[])images.Data)[flat] = value;

        Assert.Contains(said, Refused(() => CalibrationSet.Create([images], [Image]), "dataset-non-finite").Message);
    }

    [Fact]
    public void Float64TooLargeForFloat32IsNonFinite()
    {
        var data = new double[120];
        data[7] = 1e300;
        var array = new NpyArray("x", ElementType.Float64, [2, 3, 4, 5], data);

        Assert.Contains("index [0, 0, 1, 2] that is too large for float32", Refused(() => CalibrationSet.Create([array], [Image]), "dataset-non-finite").Message);
    }

    [Fact]
    public void SliceReturnsTheRequestedSamplesOfEveryInput()
    {
        var set = CalibrationSet.Create([Images(5), Masks(5)], [Image, Mask]);

        var slice = set.Slice(3, 2);

        Assert.Equal([2L, 3, 4, 5], slice[0].Shape);
        Assert.Equal(((float[])set.Inputs[0].Data)[180..300], (float[])slice[0].Data);
        Assert.Equal([2L, 4], slice[1].Shape);
        Assert.Equal([12L, 13, 14, 15, 16, 17, 18, 19], (long[])slice[1].Data);
        Assert.Empty((float[])set.Slice(5, 0)[0].Data);
        Assert.Throws<ArgumentOutOfRangeException>(() => set.Slice(4, 2));
    }
}
