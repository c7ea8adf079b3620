using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Tests.Planning;

public class CostModelTests
{
    // Hand-computed: a 64x3x3x3 Conv has 1728 parameters; 4 bits pack two per byte (the ONNX IR
    // spec's int4/uint4 layout, two values per byte, from memory) = 864 bytes, plus one FP32 scale per
    // output channel (64 x 4 bytes) and, when asymmetric, one 1-byte zero point per channel.
    [Theory]
    [InlineData(4, QuantizationScheme.Symmetric, Granularity.PerChannel, 864 + (64 * 4))]
    [InlineData(4, QuantizationScheme.Asymmetric, Granularity.PerChannel, 864 + (64 * 4) + 64)]
    [InlineData(4, QuantizationScheme.Symmetric, Granularity.PerTensor, 864 + 4)]
    [InlineData(4, QuantizationScheme.Asymmetric, Granularity.PerTensor, 864 + 4 + 1)]
    [InlineData(8, QuantizationScheme.Symmetric, Granularity.PerChannel, 1728 + 256)]
    [InlineData(2, QuantizationScheme.Symmetric, Granularity.PerChannel, 432 + 256)]
    [InlineData(3, QuantizationScheme.Asymmetric, Granularity.PerChannel, 648 + 256 + 64)]
    [InlineData(16, QuantizationScheme.Asymmetric, Granularity.PerChannel, 1728 * 2)]
    [InlineData(32, QuantizationScheme.Symmetric, Granularity.PerTensor, 1728 * 4)]
    public void ConvOf64By3By3By3CostsTheHandComputedBytes(int bits, QuantizationScheme scheme, Granularity granularity, long expected)
    {
        Assert.Equal(expected, CostModel.LayerBytes(1728, 64, bits, scheme, granularity));
    }

    [Theory]
    [InlineData(1L, 2, 1L)]
    [InlineData(7L, 3, 3L)] // 21 bits round up to 3 bytes
    [InlineData(9L, 4, 5L)] // 36 bits round up to 5 bytes
    [InlineData(5L, 7, 5L)] // 35 bits round up to 5 bytes
    [InlineData(8L, 5, 5L)] // exactly 40 bits
    public void OddCountsRoundUpToWholeBytes(long parameters, int bits, long payload)
    {
        Assert.Equal(payload + CostModel.ScaleBytes, CostModel.LayerBytes(parameters, 1, bits, QuantizationScheme.Symmetric, Granularity.PerTensor));
    }

    [Fact]
    public void PayloadMatchesAPlainBitCountForEveryWidthAndManySizes()
    {
        foreach (long parameters in new long[] { 1, 7, 8, 9, 15, 16, 17, 31, 32, 33, 1000, 1001, 123_457 })
        {
            for (int bits = BitWidths.MinInteger; bits <= BitWidths.MaxInteger; bits++)
            {
                long payload = 0;
                for (long bitCount = parameters * bits; bitCount > 0; bitCount -= 8)
                {
                    payload++;
                }

                Assert.Equal(payload + 4, CostModel.LayerBytes(parameters, 1, bits, QuantizationScheme.Symmetric, Granularity.PerTensor));
            }
        }
    }

    [Fact]
    public void AverageBitsBudgetRoundsDownToWholeBytes()
    {
        Assert.Equal(1000, CostModel.LayerBytesForAverageBits(4.0, 2000));
        Assert.Equal(1001, CostModel.LayerBytesForAverageBits(4.005, 2000)); // 1001.25
        Assert.Equal(4.0, CostModel.AverageBits(1000, 2000));
    }

    [Theory]
    [InlineData(0L, 1L, 4, "invalid-parameter-count")]
    [InlineData(100L, 1L, 9, "invalid-bit-width")]
    [InlineData(100L, 1L, 1, "invalid-bit-width")]
    [InlineData(100L, 0L, 4, "invalid-channel-count")]
    [InlineData(100L, 101L, 4, "invalid-channel-count")]
    public void BadInputIsRefusedWithACode(long parameters, long channels, int bits, string code)
    {
        var thrown = Assert.Throws<EngineException>(() => CostModel.LayerBytes(parameters, channels, bits, QuantizationScheme.Symmetric, Granularity.PerChannel));
        Assert.Equal(code, thrown.Code);
    }
}
